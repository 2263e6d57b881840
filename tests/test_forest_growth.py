"""The moderator forest on the growth model of the SEM engine.

External checks: the regression-tree reduction against scikit-learn, the level
of the root split test under no moderation, recovery of simulated moderators,
and determinism over worker processes and shards.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from wavetrail.forest import Forest, grow_forest, grow_tree
from wavetrail.forest._simulate import TRUE_MODERATORS, simulate_panel
from wavetrail.forest.models import GrowthNodeModel, SpecNodeModel
from wavetrail.sem import ModelSpec


def _one_wave_fixed_variance():
    """One observed variable, free mean, variance fixed at 1: loglik = -SSE/2 + constant."""
    spec = ModelSpec(observed=["y"])
    spec.intercept("y")
    spec.cov("y", "y", value=1.0)
    return SpecNodeModel(spec)


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_first_likelihood_split_equals_a_regression_stump(seed):
    """Reference: scikit-learn DecisionTreeRegressor(max_depth=1) (squared error), same data."""
    from sklearn.tree import DecisionTreeRegressor

    rng = np.random.default_rng(seed)
    n = 400
    X = pd.DataFrame(rng.normal(size=(n, 5)), columns=[f"x{j}" for j in range(5)])
    y = 0.8 * (X["x2"] > 0.3) + 0.4 * X["x4"] + rng.normal(size=n)
    model = _one_wave_fixed_variance()
    assert model.k == 1
    tree = grow_tree(pd.DataFrame({"y": y}), X, [0.0], model=model, split="likelihood_ratio", alpha=1.0,
                     min_size=1, max_depth=1, max_cuts=10 ** 6)
    stump = DecisionTreeRegressor(max_depth=1).fit(X.to_numpy(), y.to_numpy())
    first = tree.splits_.iloc[0]
    assert first["predictor"] == X.columns[stump.tree_.feature[0]]
    # scikit-learn stores features as float32, so its midpoint differs in the 7th digit
    assert first["cut"] == pytest.approx(stump.tree_.threshold[0], rel=1e-5, abs=1e-6)
    # the likelihood ratio is the drop in squared error (variance fixed at 1)
    left = y[X[first["predictor"]] <= first["cut"]]
    right = y[X[first["predictor"]] > first["cut"]]
    sse = lambda v: float(((v - v.mean()) ** 2).sum())  # noqa: E731
    assert first["statistic"] == pytest.approx(sse(y) - sse(left) - sse(right), rel=1e-6)


def test_growth_tree_finds_a_slope_moderator():
    wide, X, times = simulate_panel(1000, 5, n_noise=8, seed=3)
    tree = grow_tree(wide, X, times, shape="linear")
    assert tree.splits_.iloc[0]["predictor"] in TRUE_MODERATORS
    assert set(tree.splits_["predictor"]) <= set(TRUE_MODERATORS)
    assert tree.n_leaves_ >= 3


@pytest.fixture(scope="module")
def growth_forest():
    wide, X, times = simulate_panel(600, 5, n_noise=8, shape="quadratic", seed=5)
    f = grow_forest(wide, X, times, shape="quadratic", trees=12, seed=7, max_depth=2)
    return wide, X, times, f


def test_growth_forest_is_deterministic_over_jobs_and_shards(growth_forest):
    wide, X, times, f = growth_forest
    kw = dict(shape="quadratic", trees=12, seed=7, max_depth=2)
    par = grow_forest(wide, X, times, n_jobs=2, **kw)
    assert par.to_json() == f.to_json()
    assert par.importance().equals(f.importance())
    shards = [grow_forest(wide, X, times, tree_indices=[i for i in range(12) if i % 4 == k], **kw)
              for k in range(4)]
    assert Forest.merge(shards).to_json() == f.to_json()


def test_importance_csv_is_byte_identical_for_one_and_two_jobs(growth_forest, tmp_path):
    from wavetrail._io import write_table

    wide, X, times, f = growth_forest
    par = grow_forest(wide, X, times, shape="quadratic", trees=12, seed=7, max_depth=2, n_jobs=2)
    write_table(tmp_path / "one.csv", f.importance())
    write_table(tmp_path / "two.csv", par.importance())
    one = (tmp_path / "one.csv").read_bytes()
    assert one == (tmp_path / "two.csv").read_bytes()
    assert one.count(b"\n") == X.shape[1] + 1  # header + one row per predictor


def test_growth_forest_json_round_trip_and_prediction(growth_forest):
    wide, X, times, f = growth_forest
    text = f.to_json()
    g = Forest.from_json(text)
    assert g.to_json() == text
    assert isinstance(g.model_, GrowthNodeModel)
    assert np.array_equal(g.predict(X.iloc[:20]).to_numpy(), f.predict(X.iloc[:20]).to_numpy())
    g.attach_background(X)
    assert g.dependence("step_slope", [0.0, 1.0]).equals(f.dependence("step_slope", [0.0, 1.0]))
    # expected trajectories are the implied means: at the mean of everything they are near the data
    assert np.allclose(f.predict(X).to_numpy().mean(axis=0), np.nanmean(wide.to_numpy(), axis=0), atol=0.15)


def test_root_split_rate_under_no_moderation():
    """No moderator: a single tree at alpha .05 should split its root in about 5 % of panels.

    400 simulated panels (1,000 people, 5 waves, linear growth, 10 % missing waves;
    4 numeric, 1 ordered and 1 unordered noise predictor; k = 10 parameters, so the
    default minimum node size of 100 narrows the numeric cut range to about
    [.1, .9]). The accepted band 2.5-8.5 % is about two binomial standard errors
    (sd .011 at 400 draws) around the nominal 5 %, with room for the Bonferroni
    correction over predictors, which can only lower the rate.
    """
    splits = 0
    reps = 400
    for r in range(reps):
        wide, X, times = simulate_panel(1000, 5, n_noise=4, seed=10_000 + r, moderators=False)
        X = X[["lin_intercept", "step_slope", "spread_slope", "group", "noise00", "noise03"]]
        tree = grow_tree(wide, X, times, shape="linear", max_depth=1)
        splits += tree.n_leaves_ > 1
    rate = splits / reps
    se = (rate * (1 - rate) / reps) ** 0.5
    print(f"root split rate under no moderation: {rate:.4f} ({splits} of {reps}; "
          f"95 % interval {rate - 1.96 * se:.4f}-{rate + 1.96 * se:.4f})")
    assert 0.025 <= rate <= 0.085


def test_suplm_pvalue_follows_the_searched_range():
    """A narrower cut range (larger trim, or a minimum node size) gives a smaller p-value
    for the same statistic; a single cut point reduces to chi-square with k df."""
    from scipy.stats import chi2

    from wavetrail.forest import tests as T

    x, k = 18.0, 4
    wide_p = T.suplm_pvalue(x, k, lam=T.range_lambda(0.1, 0.9))
    narrow_p = T.suplm_pvalue(x, k, lam=T.range_lambda(1 / 3, 2 / 3))
    assert narrow_p < wide_p
    assert T.suplm_pvalue(x, k, lam=1.0) == pytest.approx(chi2.sf(x, k), rel=1e-9)
    # lambda depends on the range only through the odds ratio of its ends
    assert T.range_lambda(0.2, 0.6) == pytest.approx(0.6 * 0.8 / (0.2 * 0.4))


@pytest.mark.slow
def test_true_moderators_rank_first():
    """Four true moderators (one acting only on the spread of the slopes) among 16 noise
    predictors: they take ranks 1-4 in at least 9 of 10 simulated panels."""
    hits = 0
    for s in range(10):
        wide, X, times = simulate_panel(800, 5, n_noise=16, seed=200 + s)
        f = grow_forest(wide, X, times, shape="linear", trees=40, seed=s, n_jobs=2)
        top = set(f.importance()["predictor"][:4])
        hits += top == set(TRUE_MODERATORS)
    print(f"true moderators ranked 1-4 in {hits} of 10 panels")
    assert hits >= 9
