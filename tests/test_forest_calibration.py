"""Level of the split tests for categorical predictors, one kind at a time.

With no moderator at all, a single tree at alpha .05 should split its root in about
5 % of simulated panels. tests/test_forest_growth.py checks a mix dominated by numeric
predictors; here every predictor is an ordered category (the maximum-LM test over the
level boundaries, p-values from the range the node actually searched; Zeileis, Hothorn &
Hornik 2008, JCGS 17(2)) or every predictor is an unordered category (the LM chi-square
statistic).

The ordered p-value is the exact asymptotic law of the maximum over the few boundaries
actually evaluated (a Markov chain of the normalised bridge's squared norms; see
wavetrail/forest/tests.py), so both kinds are checked for uniformity of the pooled root
p-values (two-sided Kolmogorov-Smirnov) and, the ordered ones, for the share below .05
and .01. 300 null panels of 600 people (5 waves, linear growth, k = 10, minimum node
size 100), four predictors of 3, 4, 5 and 6 levels. Measured with these seeds: ordered
root split rate 5.0 % (15 of 300), unordered 2.7 % (8 of 300); pooled root p-values:
ordered two-sided KS p = .44 (with the earlier bound: 3e-69, a conservative body),
unordered two-sided KS p = .36. On Gaussian scores the ordered test at .05 has size
3.9-4.9 % for 3-6 levels and 5.3 % for two levels (1,000 draws, SE .007).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from wavetrail.forest import grow_tree
from wavetrail.forest import tests as T
from wavetrail.forest._encode import encode_predictors
from wavetrail.forest._simulate import simulate_panel
from wavetrail.forest.models import GrowthNodeModel, PanelTerms
from wavetrail.forest.tree import Settings, build_tree

LEVELS = (3, 4, 5, 6)
REPS = 300
N = 600  # people per panel; linear growth over 5 waves has k = 10
MIN_SIZE = 100  # 10 per parameter: large nodes, where the asymptotic p-values are used
ALPHA = 0.05


def _categories(rng, n, ordered):
    cols = {}
    for j, levels in enumerate(LEVELS):
        names = [f"l{v}" for v in range(levels)]
        cols[f"cat{j}"] = pd.Categorical.from_codes(rng.integers(0, levels, size=n), names, ordered=ordered)
    return pd.DataFrame(cols)


def _root_pvalues(Sw, Z, kinds, min_size):
    """Unadjusted p-value of every predictor at the root: the builder's score-based tests
    (ordered maxLM or unordered LM) on the whitened casewise scores at the root estimate."""
    if kinds[0] == "ordered":
        return T.ordered_tests(Sw, Z, kinds, min_size=min_size)[1]
    return np.array([T.unordered_test(Sw, Z[:, j], min_size=min_size)[1] for j in range(Z.shape[1])])


@pytest.fixture(scope="module")
def null_runs():
    """REPS null panels; on each, one tree on ordered-only and one on unordered-only predictors.

    The ordered tree is grown by grow_tree (the whole public path); the unordered one by
    the same builder warm-started at the ordered tree's root estimate (same people, same
    model, so the same root fit at a fifth of the cost).
    """
    out = {kind: {"split": [], "p": []} for kind in ("ordered", "unordered")}
    for r in range(REPS):
        wide, _, times = simulate_panel(N, 5, n_noise=0, seed=20_000 + r, moderators=False)
        rng = np.random.default_rng(30_000 + r)
        Xo, Xu = (_categories(rng, N, ordered).set_axis(wide.index) for ordered in (True, False))
        tree_o = grow_tree(wide, Xo, times, shape="linear", alpha=ALPHA, max_depth=1, min_size=MIN_SIZE)
        model = GrowthNodeModel(times, "linear")
        Y = wide.to_numpy(dtype=float)
        min_size = MIN_SIZE
        Zu, info_u = encode_predictors(Xu)
        tree_u = build_tree(model, PanelTerms(Y), Zu, info_u, np.arange(N), np.random.default_rng(0),
                            Settings(alpha=ALPHA, min_size=min_size, max_depth=1, mtry=Zu.shape[1]),
                            start=tree_o.theta_[0])
        assert np.array_equal(tree_u.theta_[0], tree_o.theta_[0])
        Sw = T.whiten(model.scores(tree_o.theta_[0], Y))
        for kind, tree, X in (("ordered", tree_o, Xo), ("unordered", tree_u, Xu)):
            Z, info = encode_predictors(X)
            out[kind]["split"].append(tree.n_leaves_ > 1)
            out[kind]["p"].append(_root_pvalues(Sw, Z, info.kinds, min_size))
    return {kind: (np.array(v["split"]), np.array(v["p"])) for kind, v in out.items()}


def _report(kind, split, p):
    splits, reps = int(split.sum()), len(split)
    rate = splits / reps
    se = (rate * (1 - rate) / reps) ** 0.5
    pooled = p.ravel()
    ks2 = stats.kstest(pooled, "uniform").pvalue
    ks_plus = stats.kstest(pooled, "uniform", alternative="greater").pvalue
    per = ", ".join(f"{L} levels {np.mean(p[:, j] < ALPHA):.3f}" for j, L in enumerate(LEVELS))
    print(f"\n{kind} categories: root split rate {rate:.4f} ({splits} of {reps}; 95 % interval "
          f"{max(rate - 1.96 * se, 0):.4f}-{rate + 1.96 * se:.4f}); unadjusted rejection at .05: {per}; "
          f"pooled root p-values KS vs uniform two-sided p={ks2:.3g}, one-sided (too small) p={ks_plus:.3g}")
    return rate, ks2, ks_plus


@pytest.mark.parametrize("kind", ["ordered", "unordered"])
def test_root_split_rate_under_no_moderation_for_categories(null_runs, kind):
    """The band 2-8.5 % is about -2.4 / +2.8 binomial standard errors (sd .0126 at 300
    panels) around the nominal 5 %; the Bonferroni correction over the four predictors
    can only lower the rate."""
    split, p = null_runs[kind]
    rate, _, _ = _report(kind, split, p)
    assert 0.02 <= rate <= 0.085
    # the builder splits exactly where the Bonferroni-adjusted smallest root p-value is below alpha
    assert np.array_equal(split, np.minimum(1.0, p.min(axis=1) * p.shape[1]) < ALPHA)


def test_ordered_root_pvalues_are_uniform(null_runs):
    """The exact law of the maximum over the boundaries: two-sided KS of the pooled root
    p-values does not reject, and the share below .05 and .01 is within two standard errors."""
    split, p = null_runs["ordered"]
    _, ks2, _ = _report("ordered", split, p)
    assert ks2 > 0.01
    pooled = p.ravel()
    for level in (0.05, 0.01):
        assert abs(np.mean(pooled < level) - level) <= 2 * (level * (1 - level) / len(pooled)) ** 0.5


def test_unordered_root_pvalues_are_uniform(null_runs):
    """The LM chi-square with k (C - 1) df: two-sided KS of the pooled root p-values does not reject."""
    split, p = null_runs["unordered"]
    _, ks2, _ = _report("unordered", split, p)
    assert ks2 > 0.01


def test_ordered_pvalue_size_on_gaussian_scores():
    """The ordered p-value alone, on independent standard normal scores (the limit the SEM
    scores approach): size at .05 within two standard errors of 5 % for 2-6 levels (two
    levels: a single boundary, chi-square with k df)."""
    rng = np.random.default_rng(7)
    reps, n, k = 1000, 600, 10
    levels = (2,) + LEVELS
    P = np.empty((reps, len(levels)))
    for r in range(reps):
        Sw = T.whiten(rng.normal(size=(n, k)))
        Z = np.column_stack([rng.integers(0, L, size=n) for L in levels]).astype(float)
        P[r] = T.ordered_tests(Sw, Z, ["ordered"] * len(levels), min_size=100)[1]
    size = (P < ALPHA).mean(axis=0)
    se = (ALPHA * (1 - ALPHA) / reps) ** 0.5
    print("\nordered p-value size at .05 on Gaussian scores: "
          + ", ".join(f"{L} levels {s:.4f}" for L, s in zip(levels, size)))
    assert np.all(np.abs(size - ALPHA) <= 2 * se)
