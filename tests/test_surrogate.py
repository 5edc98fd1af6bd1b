"""The surrogate search: its Gaussian-process models, its criterion, and short runs on published problems."""

from __future__ import annotations

import math

import moocore
import numpy as np
import pandas as pd
import pytest
from click.testing import CliRunner

import tradewise
from problems import PROBLEMS, write_problem
from support import CASES
from tradewise.cli import main
from tradewise.search import design_key
from tradewise.store import open_store
from tradewise.surrogate import (
    GaussianProcess,
    _negative_log_likelihood,
    expected_improvement_2d,
    expected_improvement_exact,
    expected_improvement_mc,
    features,
    hypervolume_improvement,
    probability_of_feasibility,
    start_size,
)


def _matern52(A, B, scale, lengths):
    """Matern 5/2 covariance (Rasmussen and Williams 2006, eq. 4.17, from memory)."""
    r = np.sqrt((((A[:, None, :] - B[None, :, :]) / lengths) ** 2).sum(axis=2))
    s = math.sqrt(5.0) * r
    return scale * (1.0 + s + s * s / 3.0) * np.exp(-s)


def test_model_agrees_with_a_kriging_solve_by_hand():
    """Mean and deviation on 5 points equal the kriging equations solved with numpy, same hyperparameters."""
    rng = np.random.default_rng(4)
    X = rng.random((5, 2))
    y = np.sin(6 * X[:, 0]) + X[:, 1] ** 2
    model = GaussianProcess(2, seed=0)
    model.fit(X, y)
    kernel = model.regressor.kernel_
    scale, lengths = kernel.k1.k1.constant_value, kernel.k1.k2.length_scale
    noise = kernel.k2.noise_level
    mean, spread = y.mean(), y.std()
    t = (y - mean) / spread
    K = _matern52(X, X, scale, lengths) + (noise + 1e-10) * np.eye(5)
    Xs = rng.random((7, 2))
    Ks = _matern52(Xs, X, scale, lengths)
    mu = mean + spread * Ks @ np.linalg.solve(K, t)
    var = scale + noise - np.einsum("ij,ji->i", Ks, np.linalg.solve(K, Ks.T))
    got_mu, got_sd = model.predict(Xs)
    assert np.allclose(got_mu, mu, rtol=1e-7, atol=1e-9)
    assert np.allclose(got_sd, spread * np.sqrt(var), rtol=1e-6, atol=1e-9)
    # and at a training point the model all but reproduces the data
    assert np.allclose(model.predict(X)[0], y, atol=1e-2 * spread)


def test_conditioning_agrees_with_scikit_learn():
    """Our conditioning (Cholesky factor, weights, likelihood, predictions) equals scikit-learn's
    regressor with the same kernel and its optimiser off, also after a believed point."""
    from sklearn.gaussian_process import GaussianProcessRegressor

    rng = np.random.default_rng(5)
    X = rng.random((30, 3))
    y = np.sin(5 * X[:, 0]) * X[:, 1] + X[:, 2]
    model = GaussianProcess(3)
    model.fit(X, y)
    # hyperparameters of a well-conditioned kernel matrix, so round-off stays far below the tolerances
    model.kernel = model.kernel.clone_with_theta(np.log([1.5, 0.3, 0.5, 0.8, 1e-4]))
    model.fit(X, y, tune=False)
    z = np.array([0.3, 0.6, 0.2])
    model.believe(z, 1.5)
    Z = np.vstack([X, z])
    t = np.append((y - model.mean) / model.scale, (1.5 - model.mean) / model.scale)
    theirs = GaussianProcessRegressor(model.kernel, optimizer=None).fit(Z, t)
    ours = model.regressor
    assert np.allclose(ours.L_, theirs.L_, rtol=1e-10, atol=1e-12)
    assert np.allclose(ours.alpha_, theirs.alpha_, rtol=1e-8, atol=1e-10)
    assert ours.log_marginal_likelihood_value_ == pytest.approx(
        theirs.log_marginal_likelihood_value_, rel=1e-10
    )
    new = rng.random((9, 3))
    mu, sd = theirs.predict(new, return_std=True)
    got_mu, got_sd = model.predict(new)
    assert np.allclose(got_mu, model.mean + model.scale * mu, rtol=1e-8, atol=1e-10)
    assert np.allclose(got_sd, model.scale * sd, rtol=1e-6, atol=1e-10)


def test_believed_point_pins_the_model_there():
    """After the kriging believer takes a value at a point, the model predicts it there with little doubt."""
    rng = np.random.default_rng(1)
    X = rng.random((8, 3))
    model = GaussianProcess(3)
    model.fit(X, X.sum(axis=1))
    z = np.array([0.5, 0.1, 0.9])
    before = model.predict(z[None])[1][0]
    model.believe(z, 7.0)
    mu, sd = model.predict(z[None])
    assert abs(mu[0] - 7.0) < 0.05 and sd[0] < before / 5


def test_two_objective_criterion_agrees_with_monte_carlo():
    """The exact two-objective expected hypervolume improvement equals a 200,000-draw Monte Carlo mean."""
    front = np.array([[0.1, 0.9], [0.3, 0.5], [0.6, 0.3], [0.9, 0.05]])
    ref = np.array([1.1, 1.1])
    mu = np.array([[0.35, 0.35], [0.05, 1.0], [0.8, 0.8], [1.2, 0.2]])
    sd = np.array([[0.1, 0.2], [0.05, 0.05], [0.3, 0.1], [0.2, 0.2]])
    exact = expected_improvement_2d(mu, sd, front, ref)
    rng = np.random.default_rng(0)
    noise = rng.standard_normal((200_000, 2))
    base = moocore.hypervolume(front, ref=ref)
    for i in range(len(mu)):
        y = mu[i] + sd[i] * noise
        # improvement of each draw, by moocore on the front with the draw added (vectorised in strips)
        sample = [moocore.hypervolume(np.vstack([front, p]), ref=ref) - base for p in y[:2000]]
        small = np.mean(sample)
        assert exact[i] == pytest.approx(small, abs=4 * np.std(sample) / math.sqrt(2000) + 1e-9)
    mc = expected_improvement_mc(mu, sd, front, ref, draws=4000, rng=np.random.default_rng(5))
    assert np.allclose(mc, exact, rtol=0.1, atol=2e-3)


def test_criterion_without_doubt_is_the_hypervolume_improvement():
    """With a vanishing deviation the criterion is the improvement moocore measures."""
    front = np.array([[0.2, 0.7], [0.5, 0.4], [0.8, 0.1]])
    ref = np.array([1.1, 1.1])
    points = np.array([[0.3, 0.3], [0.9, 0.9], [0.0, 1.0]])
    got = expected_improvement_2d(points, np.full_like(points, 1e-9), front, ref)
    base = moocore.hypervolume(front, ref=ref)
    want = [moocore.hypervolume(np.vstack([front, p]), ref=ref) - base for p in points]
    assert np.allclose(got, want, atol=1e-8)


def test_probability_of_feasibility_is_the_normal_mass_inside_the_limits():
    """Probability of feasibility equals the normal distribution's mass within the limits (scipy)."""
    from scipy.stats import norm

    mu, sd = np.array([1.0, 3.0]), np.array([0.5, 2.0])
    got = probability_of_feasibility(mu, sd, 0.5, 2.0)
    assert np.allclose(got, norm.cdf(2.0, mu, sd) - norm.cdf(0.5, mu, sd))
    assert np.allclose(probability_of_feasibility(mu, sd, None, 2.0), norm.cdf(2.0, mu, sd))


def test_start_size_follows_the_stated_rule():
    """The start is 3 d + 2 designs, at least 5, at most 11 d - 1."""
    assert [start_size(d) for d in (1, 2, 6, 30)] == [5, 8, 20, 92]


@pytest.mark.slow
def test_zdt1_front_after_60_evaluations(tmp_path):
    """On ZDT1 with 6 variables 60 evaluations reach 85 % of the exact front's hypervolume (ours: about 0.9)."""
    case = write_problem(tmp_path / "zdt1", "zdt1", 6)
    result = tradewise.run(case, surrogate=True, evaluations=60, seed=1)
    assert result.n_evals == 60
    assert PROBLEMS["zdt1"].ratio(result.front.points()) >= 0.85
    assert "The models predicted f1 within" in result.message
    history = result.history
    assert (history["surrogate"].iloc[1:] == "models").all()
    assert history["model_error_f2"].iloc[1:].notna().all()


@pytest.mark.slow
def test_bnh_front_is_feasible_and_close(tmp_path):
    """On BNH (constrained, Binh and Korn 1997) 50 evaluations reach 90 % of the front's hypervolume."""
    case = write_problem(tmp_path / "bnh", "bnh")
    result = tradewise.run(case, surrogate=True, evaluations=50, seed=2)
    front = result.front.table
    assert ((front["c1"] <= 25.0) & (front["c2"] >= 7.7)).all()
    assert PROBLEMS["bnh"].ratio(result.front.points()) >= 0.9


@pytest.mark.slow
def test_mixed_designs_stay_on_their_sets_and_predictions_are_archived(tmp_path):
    """Integers, choices and flags are proposed only on their values; each proposal's prediction is archived."""
    store = tmp_path / "a.sqlite"
    result = tradewise.run(CASES / "mixed", surrogate=True, evaluations=30, seed=3, store=store)
    table = result.evaluations
    assert set(table["finish"]) <= {"bare", "anodised", "painted"}
    assert set(table["fast"]) <= {True, False}
    assert all(float(c).is_integer() and -3 <= c <= 7 for c in table["count"])
    assert table["width"].between(0.5, 4.0).all()
    keys = [design_key(r) for r in table[["width", "count", "finish", "fast"]].to_dict("records")]
    assert len(set(keys)) == len(keys)  # no design evaluated twice
    with open_store(store, create=False) as archive:
        predicted = archive.predictions(result.run_id)
    assert len(predicted) > 0 and set(predicted["name"]) == {"cost", "life", "load"}
    assert predicted["eval_id"].isin(table["eval_id"]).all()
    # life is maximised: predictions are stored in the model's own sense, beside its real value
    rows = predicted[predicted["name"] == "life"].merge(table, on="eval_id")
    assert np.allclose(rows["actual"], rows["life"])
    assert (rows["sd"] > 0).all()


@pytest.mark.slow
def test_resume_rebuilds_the_models_from_the_archive(tmp_path):
    """A resumed surrogate run learns from the archive and evaluates no design twice."""
    store = tmp_path / "a.sqlite"
    case = write_problem(tmp_path / "zdt1", "zdt1", 3)
    first = tradewise.run(case, surrogate=True, evaluations=16, seed=1, store=store)
    second = tradewise.resume(store, evaluations=22)
    assert second.n_evals == 22 and second.status == "budget"
    with open_store(store, create=False) as archive:
        table = archive.evaluations(first.run_id)
        history = archive.history(first.run_id)
    real = table[~table["cached"]]
    assert len(real) == 22
    assert not real[["x1", "x2", "x3"]].duplicated().any()
    assert (history["surrogate"].iloc[-3:] == "models").all()


def test_many_variables_go_on_as_nsga2(tmp_path):
    """Above 15 variables the run says it goes on as NSGA-II, and does."""
    case = write_problem(tmp_path / "zdt1", "zdt1", 16)
    result = tradewise.run(case, surrogate=True, evaluations=120, seed=1, population=20)
    assert "Went on as plain NSGA-II because the case has 16 variables" in result.message
    assert result.n_evals == 120 and (result.history["surrogate"] == "NSGA-II").all()


def test_models_no_better_than_the_mean_hand_over_to_nsga2(make_case):
    """A model of pure noise predicts no better than the mean; the run says so and goes on as NSGA-II."""
    folder = make_case(
        """
        title = "noise"
        model = "model.py:evaluate"
        [variables]
        a = { type = "real", low = 0.0, high = 1.0 }
        b = { type = "real", low = 0.0, high = 1.0 }
        [objectives]
        f1 = { goal = "min" }
        f2 = { goal = "min" }
        """,
        """
        import random
        def evaluate(d):
            r = random.Random(repr(d))
            return {"f1": d["a"], "f2": r.random()}
        """,
    )
    result = tradewise.run(folder, surrogate=True, evaluations=60, seed=1)
    assert "predicted f2 no better than the mean" in result.message
    assert (result.history["surrogate"] == "NSGA-II").any()
    assert result.n_evals == 60


def test_cli_run_surrogate(tmp_path):
    """`tradewise run CASE --surrogate` runs the surrogate search and writes its columns to history.csv."""
    case = write_problem(tmp_path / "zdt1", "zdt1", 2)
    out = tmp_path / "run"
    result = CliRunner().invoke(
        main, ["run", str(case), "--surrogate", "--evaluations", "12", "--out", str(out), "--quiet"]
    )
    assert result.exit_code == 0, result.output
    history = pd.read_csv(out / "history.csv")
    assert "model_error_f1" in history.columns and "The models predicted" in result.output


def test_check_suggests_the_surrogate_for_a_slow_model(make_case):
    """`tradewise check` on a model taking over a second an evaluation mentions --surrogate; a quick one does not."""
    toml = """
        title = "slow"
        model = "model.py:evaluate"
        [variables]
        a = { type = "real", low = 0.0, high = 1.0 }
        [objectives]
        f1 = { goal = "min" }
        f2 = { goal = "max" }
        """
    slow = make_case(
        toml,
        "import time\ndef evaluate(d):\n    time.sleep(1.05)\n    return {'f1': d['a'], 'f2': d['a']}\n",
        name="slow",
    )
    quick = make_case(
        toml, "def evaluate(d):\n    return {'f1': d['a'], 'f2': d['a']}\n", name="quick"
    )
    said = CliRunner().invoke(main, ["check", str(slow)])
    assert said.exit_code == 0, said.output
    assert "--surrogate" in said.output
    assert "--surrogate" not in CliRunner().invoke(main, ["check", str(quick)]).output


def test_older_archive_has_no_predictions(tmp_path):
    """An archive written before the predictions table existed opens and reports no predictions."""
    import shutil
    from pathlib import Path

    copy = tmp_path / "archive.sqlite"
    shutil.copy(Path(__file__).parent / "fixtures" / "runs" / "mixed" / "archive.sqlite", copy)
    with open_store(copy, create=False) as archive:
        table = archive.predictions(archive.latest_run())
    assert len(table) == 0 and list(table.columns)[:3] == ["generation", "eval_id", "name"]


def test_rounds_propose_as_many_designs_as_workers(tmp_path):
    """With two workers each round after the start proposes two distinct designs (kriging believer)."""
    case = write_problem(tmp_path / "zdt1", "zdt1", 2)
    result = tradewise.run(case, surrogate=True, evaluations=16, seed=4, workers=2)
    rounds = result.history.iloc[1:]
    assert rounds["new"].tolist() == [2] * len(rounds) and len(rounds) == 4
    assert not result.evaluations[["x1", "x2"]].duplicated().any()


_HOLE_TOML = """
    title = "ZDT1 whose model fails on a band of x1"
    model = "model.py:evaluate"
    [variables]
    x1 = { type = "real", low = 0.0, high = 1.0 }
    x2 = { type = "real", low = 0.0, high = 1.0 }
    x3 = { type = "real", low = 0.0, high = 1.0 }
    [objectives]
    f1 = { goal = "min" }
    f2 = { goal = "min" }
    """
_HOLE_MODEL = """
    import math
    def evaluate(d):
        if 0.3 < d["x1"] < 0.55:
            raise RuntimeError("solver diverged")
        g = 1 + 9 * (d["x2"] + d["x3"]) / 2
        return {"f1": d["x1"], "f2": g * (1 - math.sqrt(d["x1"] / g))}
    """


@pytest.mark.slow
def test_failed_evaluations_steer_the_models_away(make_case):
    """ZDT1 (Zitzler, Deb and Thiele 2000) with 3 variables whose model raises for 0.3 < x1 < 0.55,
    a band across the front: the models learn where evaluations fail and stop proposing there.

    Measured over seeds 1-3 at 60 evaluations: 14, 18 and 12 of the 49 designs after the start
    failed with a model of the failures; without one, 40 of 45, 40 of 41 and 40 of 41 failed (the
    criterion values the gap in the front, and the objectives' models never see a failure).
    """
    folder = make_case(_HOLE_TOML, _HOLE_MODEL)
    result = tradewise.run(folder, surrogate=True, evaluations=60, seed=1)
    table = result.evaluations.sort_values("eval_id")
    after_start = table.iloc[start_size(3) :]
    assert (after_start["status"] != "ok").sum() <= 0.4 * len(after_start)
    assert "Went on as plain NSGA-II" not in result.message  # failures do not judge the models
    assert len(result.front) >= 15


def test_a_searcher_that_gave_up_saves_its_state_before_nsga2_starts(make_case):
    """Between the round that gives up on the models and NSGA-II's first proposal the run saves its
    state: there are no survivors yet, and the state says so instead of failing."""
    import json

    from tradewise._pymoo import Space
    from tradewise.case import load_case
    from tradewise.surrogate import SurrogateSearcher

    case = load_case(make_case(_HOLE_TOML, _HOLE_MODEL))
    searcher = SurrogateSearcher(case, Space(case), population=None, seed=1)
    searcher._give_up("a test", quiet=True)
    assert searcher.survivors().shape == (0, 3)
    state = json.loads(searcher.state(generation=4, eval_ids=[]))
    assert state["reason"] == "a test" and state["fallback"] is None


def _improvement_by_moocore(points, front, ref):
    """Hypervolume each point adds to ``front``: moocore on the front with and without it."""
    base = moocore.hypervolume(front, ref=ref)
    return np.array([moocore.hypervolume(np.vstack([front, p]), ref=ref) - base for p in points])


@pytest.mark.parametrize("n_obj", [2, 3])
def test_hypervolume_improvement_agrees_with_moocore(n_obj):
    """The improvement summed over undominated columns equals moocore's hypervolume with and without the point."""
    rng = np.random.default_rng(n_obj)
    front = rng.random((40, n_obj))
    front /= np.linalg.norm(
        front, axis=1, keepdims=True
    )  # points on a sphere: none dominates another
    ref = np.full(n_obj, 1.1)
    points = rng.random((200, n_obj)) * 1.2
    points[:3] = front[:3]  # on the front: adds nothing
    points[3] = [1.2] + [0.0] * (n_obj - 1)  # beyond the reference in one objective: nothing
    got = hypervolume_improvement(points, front, ref)
    want = _improvement_by_moocore(points, front, ref)
    assert np.allclose(got, want, atol=1e-12)
    assert np.all(got[:4] == 0) and (want > 0).sum() > 20
    # an empty front: the whole box between the point and the reference
    assert hypervolume_improvement(points[4:5], np.empty((0, n_obj)), ref)[0] == pytest.approx(
        float(np.prod(ref - points[4]))
    )


def test_three_objective_criterion_agrees_with_monte_carlo():
    """The exact three-objective expected hypervolume improvement equals a Monte Carlo mean of moocore's improvements."""
    rng = np.random.default_rng(7)
    front = rng.random((15, 3))
    front /= np.linalg.norm(front, axis=1, keepdims=True)
    ref = np.full(3, 1.1)
    mu = np.array([[0.4, 0.4, 0.4], [0.05, 0.9, 0.5], [0.9, 0.9, 0.9], [0.7, 0.2, 0.75]])
    sd = np.array([[0.1, 0.2, 0.1], [0.05, 0.05, 0.3], [0.3, 0.1, 0.2], [0.01, 0.02, 0.03]])
    exact = expected_improvement_exact(mu, sd, front, ref)
    noise = np.random.default_rng(0).standard_normal((3000, 3))
    for i in range(len(mu)):
        sample = _improvement_by_moocore(mu[i] + sd[i] * noise, front, ref)
        assert exact[i] == pytest.approx(
            sample.mean(), abs=4 * sample.std() / math.sqrt(len(sample)) + 1e-9
        )
    # with two objectives it is the strip formula
    two = expected_improvement_exact(mu[:, :2], sd[:, :2], front[:, :2], ref[:2])
    assert np.allclose(two, expected_improvement_2d(mu[:, :2], sd[:, :2], front[:, :2], ref[:2]))
    # without doubt it is the improvement itself
    sure = expected_improvement_exact(mu, np.full_like(mu, 1e-9), front, ref)
    assert np.allclose(sure, _improvement_by_moocore(mu, front, ref), atol=1e-8)


@pytest.mark.filterwarnings("ignore::sklearn.exceptions.ConvergenceWarning")
def test_likelihood_and_gradient_agree_with_scikit_learn():
    """Our marginal likelihood and its gradient equal scikit-learn's for the same kernel and hyperparameters."""
    from sklearn.gaussian_process import GaussianProcessRegressor

    rng = np.random.default_rng(2)
    X = rng.random((25, 3))
    y = np.cos(4 * X[:, 0]) + X[:, 1] * X[:, 2]
    t = (y - y.mean()) / y.std()
    model = GaussianProcess(3)
    theta = model.kernel.theta + np.array([0.3, -0.2, 0.1, 0.4, 2.0])
    kernel = model.kernel.clone_with_theta(theta)
    value, gradient = _negative_log_likelihood(theta, (X.T[:, :, None] - X.T[:, None, :]) ** 2, t)
    theirs = GaussianProcessRegressor(kernel, optimizer=None).fit(X, t)
    want, want_gradient = theirs.log_marginal_likelihood(theta, eval_gradient=True)
    assert value == pytest.approx(-want, rel=1e-9)
    assert np.allclose(gradient, -want_gradient, rtol=1e-7, atol=1e-9)
    # and the fit finds at least scikit-learn's own optimum
    model.fit(X, y)
    sk = GaussianProcessRegressor(kernel, optimizer="fmin_l_bfgs_b").fit(X, t)
    assert (
        model.regressor.log_marginal_likelihood_value_ >= sk.log_marginal_likelihood_value_ - 1e-3
    )


def test_function_search_keeps_mixed_rows_legal_and_reaches_the_front():
    """NSGA-II on a cheap function: rows stay on legal values, and the population ends near the front."""
    from tradewise._pymoo import Space, minimise_function
    from tradewise.case import load_case

    space = Space(load_case(CASES / "mixed"))
    names = [v.name for v in space.variables]
    w, c = names.index("width"), names.index("count")

    def function(X):
        F = np.column_stack([(X[:, w] - 1.0) ** 2, (X[:, w] - 3.0) ** 2 + (X[:, c] - 2) ** 2])
        return F, (X[:, c : c + 1] - 4.0)  # count <= 4

    rows = minimise_function(
        space, function, n_obj=2, n_con=1, population=30, generations=40, seed=1
    )
    assert len(rows) == 30
    assert np.array_equal(rows, space.repair(rows))
    assert np.all(rows[:, c] <= 4)
    assert np.all((rows[:, w] > 0.9) & (rows[:, w] < 3.1)) and np.mean(rows[:, c] == 2) > 0.8


def test_summary_gives_errors_as_shares(tmp_path):
    """The sentence on the models' accuracy gives each error as a share with one decimal, at least 0.1 %."""
    from tradewise._pymoo import Space
    from tradewise.case import load_case
    from tradewise.surrogate import SurrogateSearcher

    case = load_case(write_problem(tmp_path / "zdt1", "zdt1", 2))
    searcher = SurrogateSearcher(case, Space(case), population=None, seed=1)
    searcher._log = [{"error": np.array([1.1e-08, 0.02345])}] * 20
    said = searcher.summary()
    assert "f1 within 0.1 % and f2 within 2.3 % of each one's observed range" in said
    assert "e-" not in said


def test_an_output_spanning_decades_is_modelled_in_its_logarithm():
    """y = exp(6 x1) + x2 spans two decades on [0, 1]^2: the model chosen by leave-one-out misses
    (Rasmussen and Williams 2006, eq. 5.12) is the log one, and it predicts new points better than
    the plain one; an output of both signs keeps the plain model. The leave-one-out misses agree
    with refitting by hand without each point (same hyperparameters)."""
    rng = np.random.default_rng(3)
    X = rng.random((25, 2))
    y = np.exp(6 * X[:, 0]) + X[:, 1]
    model = GaussianProcess(2)
    model.fit_either(X, y)
    assert model.sign == 1.0
    plain = GaussianProcess(2)
    plain.fit(X, y)
    new = rng.random((200, 2))
    truth = np.exp(6 * new[:, 0]) + new[:, 1]
    assert np.mean(np.abs(model.predict(new)[0] - truth)) < np.mean(
        np.abs(plain.predict(new)[0] - truth)
    )
    # leave-one-out by hand for the plain model
    from sklearn.gaussian_process import GaussianProcessRegressor

    by_hand = []
    for i in range(len(y)):
        keep = np.arange(len(y)) != i
        t = (y[keep] - plain.mean) / plain.scale  # the standardisation of all points
        alone = GaussianProcessRegressor(plain.kernel, optimizer=None, normalize_y=False)
        alone.fit(X[keep], t)
        by_hand.append(abs(plain.mean + plain.scale * alone.predict(X[i : i + 1])[0] - y[i]))
    assert plain._leave_one_out_miss(y) == pytest.approx(np.mean(by_hand), rel=1e-6)
    mixed = GaussianProcess(2)
    mixed.fit_either(X, y - 50.0)
    assert mixed.sign == 0.0


def test_polish_brings_a_three_objective_pick_to_the_models_front(tmp_path):
    """DTLZ2 (Deb, Thiele, Laumanns and Zitzler 2002) with 4 variables, models fitted on 40 designs:
    a pick with distance term g = 0.08 comes out of the compass search with a smaller g and a
    larger criterion; a two-worker round on it proposes two distinct designs."""
    from tradewise._pymoo import Space
    from tradewise.case import load_case
    from tradewise.surrogate import SurrogateSearcher

    case = load_case(write_problem(tmp_path / "dtlz2", "dtlz2", 4))
    space = Space(case)
    searcher = SurrogateSearcher(case, space, population=None, seed=3)
    rng = np.random.default_rng(3)
    X = rng.random((40, 4))

    def dtlz2(X):
        g = ((X[:, 2:] - 0.5) ** 2).sum(axis=1)
        a, b = X[:, 0] * math.pi / 2, X[:, 1] * math.pi / 2
        return (1 + g)[:, None] * np.column_stack(
            [np.cos(a) * np.cos(b), np.cos(a) * np.sin(b), np.sin(a)]
        )

    searcher._X, searcher._Y = list(X), list(dtlz2(X))
    searcher._ok = [True] * len(X)
    _, Y = searcher._fit()
    front, ideal, span = searcher._scale(Y)
    ref = np.full(3, 1.1)
    x = np.array([0.4, 0.6, 0.7, 0.3])
    polished = searcher._polish(x, searcher._models, front, ideal, span, ref)

    def g(row):
        return float(((row[2:] - 0.5) ** 2).sum())

    # both rows judged together, as the search judges its steps (the criterion's fallbacks apply
    # to a whole set of rows at once)
    mu, sd = searcher._predict(features(space, np.vstack([polished, x])))
    mu[:, :3] += sd[:, :3]
    after, before = searcher._score(mu, sd, front, ideal, span, ref)
    assert g(polished) < g(x)
    assert after > before
    searcher.batch = 2
    rows, _, _ = searcher._infill()
    assert len(rows) == 2 and not np.array_equal(rows[0], rows[1])


def test_hyperparameters_fitted_on_a_share_of_the_rows_must_explain_all_of_them():
    """A refit on a share of the rows keeps whichever hyperparameters, new or earlier, give all
    the rows the greater likelihood (scikit-learn's likelihood for the earlier ones)."""
    from sklearn.gaussian_process import GaussianProcessRegressor

    rng = np.random.default_rng(6)
    X = rng.random((80, 3))
    y = np.sin(4 * X[:, 0]) + 3 * (X[:, 1] - 0.5) ** 2 + X[:, 2]
    model = GaussianProcess(3)
    model.fit(X[:40], y[:40])
    earlier = model.kernel
    # the share: rows where the second input hardly varies, so it looks irrelevant there
    share = np.flatnonzero(np.abs(X[:, 1] - 0.5) < 0.1)
    model.fit(X, y, tune=True, fit_on=share)
    t = (y - model.mean) / model.scale
    theirs = GaussianProcessRegressor(earlier, optimizer=None).fit(X, t)
    assert model.regressor.log_marginal_likelihood_value_ >= (
        theirs.log_marginal_likelihood_value_ - 1e-8
    )


def test_a_rejected_log_model_predicts_as_the_plain_model():
    """An output of one sign spanning decades is tried in its logarithm; when leave-one-out prefers
    the output as it is, the model put back predicts exactly as a plain fit (it once kept the log
    fit's length scales and factor beside the plain fit's weights: misses of 22 on values below 1)."""
    rng = np.random.default_rng(0)
    Z = rng.random((30, 2))
    y = np.abs(np.where(Z[:, 0] < 0.05, 1e-17, Z[:, 0]) + 0.3 * np.sin(6 * Z[:, 1]) + 0.31) + 1e-12
    either = GaussianProcess(2, seed=1)
    either.fit_either(Z, y)
    assert either.sign == 0.0  # the logarithm was tried and turned down
    plain = GaussianProcess(2, seed=1)
    plain.fit(Z, y)
    probe = rng.random((20, 2))
    for a, b in zip(either.predict(probe), plain.predict(probe), strict=True):
        np.testing.assert_allclose(a, b, rtol=1e-9, atol=1e-12)
