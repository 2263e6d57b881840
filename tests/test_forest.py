"""Moderator forest: split tests, cut search, trees, forests, JSON, determinism.

These tests use the small closed-form reference node model
(:class:`wavetrail.forest.models.NormalNodeModel`) so they run in seconds;
tests/test_forest_growth.py runs the same machinery on the growth model of the
SEM engine.
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
from scipy.stats import chi2

from wavetrail.errors import DataError, ModelError, WavetrailError
from wavetrail.forest import Forest, grow_forest, grow_tree
from wavetrail.forest import tests as T
from wavetrail.forest import _supLM_table as table
from wavetrail.forest.models import NormalNodeModel, PanelTerms


def _panel(n=600, p=3, seed=0, effect=0.8):
    rng = np.random.default_rng(seed)
    X = pd.DataFrame(rng.normal(size=(n, 6)), columns=[f"x{j}" for j in range(6)])
    X["cat"] = pd.Categorical(rng.choice(list("abcd"), n))
    X["ord"] = pd.Categorical(rng.choice(["lo", "mid", "hi"], n), categories=["lo", "mid", "hi"],
                              ordered=True)
    X.loc[rng.random(n) < 0.1, "x1"] = np.nan
    Y = rng.normal(size=(n, p))
    Y += effect * (X["x1"].fillna(0).to_numpy() > 0.3)[:, None]
    Y += 0.6 * effect * (X["cat"].isin(["b", "d"])).to_numpy()[:, None]
    Y[rng.random((n, p)) < 0.1] = np.nan
    return pd.DataFrame(Y, columns=[f"w{j}" for j in range(p)]), X


# ---------------------------------------------------------------- the null table and tests

def test_suplm_table_is_monotone_and_matches_chi2_limits():
    allq = np.asarray(table.QUANTILES)  # (trim, k, tail)
    # a wider cut-point range (smaller trim) gives a larger supremum (central tail points)
    mid = [table.TAIL.index(t) for t in (0.5, 0.1, 0.05)]
    assert np.all(np.diff(allq[:, :, mid], axis=0) < 0)
    q = allq[table.TRIMS.index(0.1)]
    assert np.all(np.diff(q, axis=1) > 0)  # larger values for smaller tail probabilities
    assert np.all(np.diff(q, axis=0) > 0)  # and for more parameters
    # the sup over t exceeds the pointwise chi-square quantile (the LM at one t is chi2_k)
    j = table.TAIL.index(0.05)
    k = np.arange(1, q.shape[0] + 1)
    assert np.all(q[:, j] > chi2.isf(0.05, k))
    # ...but by less than a Bonferroni bound over 1000 grid points would allow
    assert np.all(q[:, j] < chi2.isf(0.05 / 1000, k))


def test_suplm_pvalue_inverts_the_table():
    j = table.TAIL.index(0.05)
    for k in (1, 3, 14):
        x = table.QUANTILES[table.TRIMS.index(0.1)][k - 1][j]
        assert T.suplm_pvalue(x, k) == pytest.approx(0.05, rel=1e-6)
    # monotone decreasing, also in the extrapolated tail
    xs = np.linspace(0.5, 120, 300)
    ps = [T.suplm_pvalue(x, 5) for x in xs]
    assert all(a >= b for a, b in zip(ps, ps[1:]))
    assert ps[-1] < 1e-12


def test_maxlm_exact_law_matches_a_simulated_bridge():
    """The exact law of the largest LM statistic over a few fixed cuts (Markov chain of the
    normalised bridge's squared norms) against a direct simulation of the Brownian bridge at
    those cuts (fixed seed, 200,000 draws: Monte Carlo SE about .0005 at p = .05)."""
    rng = np.random.default_rng(21)
    reps = 200_000
    for k, ts in [(1, [0.3, 0.6]), (3, [0.2, 0.5, 0.8]), (14, [0.25, 0.45, 0.7]), (5, np.linspace(0.15, 0.85, 8))]:
        ts = np.asarray(ts)
        tt = np.append(ts, 1.0)
        W = np.cumsum(rng.normal(size=(reps, len(tt), k)) * np.sqrt(np.diff(tt, prepend=0.0))[None, :, None], axis=1)
        bridge = W[:, :-1] - ts[None, :, None] * W[:, -1:, :]
        top = ((bridge ** 2).sum(axis=-1) / (ts * (1 - ts))[None]).max(axis=1)
        for level in (0.3, 0.05, 0.01):
            x = chi2.isf(level / len(ts), k)
            p = T.maxlm_pvalue(x, k, ts)
            mc = np.mean(top > x)
            assert abs(p - mc) < 4 * np.sqrt(mc * (1 - mc) / reps) + 1e-4
            # between the largest single tail and Bonferroni, strictly inside for correlated cuts
            assert chi2.sf(x, k) < p < len(ts) * chi2.sf(x, k)
    assert T.maxlm_pvalue(7.0, 3, [0.4]) == pytest.approx(chi2.sf(7.0, 3), rel=1e-12)
    assert T.maxlm_pvalue(7.0, 3, np.linspace(0.49, 0.51, 5)) is None  # cuts too close: bounds instead


def test_score_tests_hold_their_level_under_the_null():
    """Brownian-bridge scores (iid, mean zero): rejection near 5 % for all three tests."""
    rng = np.random.default_rng(7)
    rej = np.zeros(3)
    reps = 400
    for _ in range(reps):
        S = rng.normal(size=(300, 2))
        S -= S.mean(axis=0)
        Sw = T.whiten(S)
        Z = np.column_stack([rng.normal(size=300), rng.integers(0, 4, size=300).astype(float)])
        _, p, _ = T.ordered_tests(Sw, Z, ["numeric", "ordered"])
        _, pu, _ = T.unordered_test(Sw, Z[:, 1])
        rej += np.array([p[0] < 0.05, p[1] < 0.05, pu < 0.05])
    rate = rej / reps
    # binomial sd at 400 draws is about 0.011; the ordered test (three boundaries) uses the exact law
    assert 0.025 < rate[0] < 0.08
    assert 0.025 < rate[1] < 0.08
    assert 0.025 < rate[2] < 0.08


def test_unordered_lm_equals_ordered_lm_for_two_levels():
    rng = np.random.default_rng(3)
    S = rng.normal(size=(200, 3))
    S -= S.mean(axis=0)
    Sw = T.whiten(S)
    z = rng.integers(0, 2, size=200).astype(float)
    s_u, p_u, df = T.unordered_test(Sw, z)
    s_o, p_o, npts = T.ordered_tests(Sw, z[:, None], ["ordered"])
    assert df == 3 and npts[0] == 1
    assert s_u == pytest.approx(s_o[0], rel=1e-10)
    assert p_u == pytest.approx(p_o[0], rel=1e-10)


def test_whitened_scores_have_identity_information():
    rng = np.random.default_rng(1)
    S = rng.normal(size=(500, 3)) @ np.array([[2.0, 0.3, 0], [0, 1.0, 0.5], [0, 0, 0.2]])
    Sw = T.whiten(S)
    assert np.allclose(Sw.T @ Sw / 500, np.eye(3), atol=1e-10)
    # a column without information is dropped
    assert T.whiten(np.hstack([S, np.zeros((500, 1))])).shape[1] == 3


# ---------------------------------------------------------------- sufficient statistics

def test_group_stats_equal_direct_sums():
    rng = np.random.default_rng(2)
    Y = rng.normal(size=(50, 3))
    Y[rng.random(Y.shape) < 0.3] = np.nan
    terms = PanelTerms(Y)
    rows = np.arange(10, 50)
    groups = (rows % 3).astype(np.int64)
    st = terms.group_stats(rows, groups, 3)
    for g in range(3):
        sub = Y[rows[groups == g]]
        obs = ~np.isnan(sub)
        pat = [np.flatnonzero((terms.masks == o).all(axis=1))[0] for o in obs]
        for P in range(terms.n_patterns):
            mine = sub[np.asarray(pat) == P]
            assert st.n[g, P] == len(mine)
            y0 = np.nan_to_num(mine)
            assert np.allclose(st.sums[g, P], y0.sum(axis=0))
            assert np.allclose(st.cross[g, P], y0.T @ y0)


# ---------------------------------------------------------------- trees

def test_tree_finds_the_moderators_and_routes_missing_values():
    wide, X = _panel()
    tree = grow_tree(wide, X, [0, 1, 2], model=NormalNodeModel(3))
    sp = tree.splits_
    assert list(sp.columns) == ["node", "predictor", "cut", "statistic", "p"]
    assert sp.iloc[0]["predictor"] == "x1"
    assert abs(sp.iloc[0]["cut"] - 0.3) < 0.15
    assert set(sp["predictor"]) <= {"x1", "cat"}
    assert "cat" in set(sp["predictor"])
    assert tree.n_leaves_ == len(sp) + 1
    assert (sp["p"] < 0.05).all()
    # every person lands in a leaf, also with the split predictor missing
    from wavetrail.forest._encode import encode_predictors
    Xe, _ = encode_predictors(X)
    leaves = tree.apply(Xe)
    assert set(np.unique(leaves)) <= set(tree.leaves.tolist())
    assert tree.nodes_["n"].iloc[0] == len(wide)


def test_tree_on_pure_noise_does_not_split():
    wide, X = _panel(effect=0.0, seed=5)
    tree = grow_tree(wide, X, [0, 1, 2], model=NormalNodeModel(3))
    assert tree.n_leaves_ == 1
    assert tree.splits_.empty


def test_variance_only_moderator_is_found_by_the_score_test():
    rng = np.random.default_rng(4)
    n = 800
    z = rng.normal(size=n)
    Y = rng.normal(size=(n, 2)) * np.where(z > 0, 1.8, 1.0)[:, None]
    X = pd.DataFrame({"z": z, "noise": rng.normal(size=n)})
    tree = grow_tree(pd.DataFrame(Y), X, [0, 1], model=NormalNodeModel(2))
    assert tree.splits_.iloc[0]["predictor"] == "z"
    assert abs(tree.splits_.iloc[0]["cut"]) < 0.25


def test_min_size_and_max_depth_stop_the_tree():
    wide, X = _panel(n=800)
    tree = grow_tree(wide, X, [0, 1, 2], model=NormalNodeModel(3), min_size=150)
    assert tree.nodes_["n"][tree.nodes_["leaf"]].min() >= 150
    shallow = grow_tree(wide, X, [0, 1, 2], model=NormalNodeModel(3), max_depth=1)
    assert shallow.n_leaves_ == 2


def test_likelihood_search_option_splits_on_the_moderator():
    wide, X = _panel()
    tree = grow_tree(wide, X, [0, 1, 2], model=NormalNodeModel(3), split="likelihood_ratio")
    assert tree.splits_.iloc[0]["predictor"] == "x1"
    with pytest.raises(ModelError):
        grow_tree(wide, X, [0, 1, 2], model=NormalNodeModel(3), split="best")


# ---------------------------------------------------------------- forests

@pytest.fixture(scope="module")
def small_forest():
    wide, X = _panel(n=500)
    return wide, X, grow_forest(wide, X, [0, 1, 2], model=NormalNodeModel(3), trees=40, seed=11)


def test_forest_importance_ranks_the_moderators_first(small_forest):
    _, _, forest = small_forest
    imp = forest.importance()
    assert list(imp.columns) == ["predictor", "importance", "se", "rank", "tested", "candidate", "untested"]
    assert set(imp["predictor"][:2]) == {"x1", "cat"}
    assert imp["rank"].tolist() == list(range(1, len(imp) + 1))
    assert (imp["se"][:2] > 0).all()
    assert len(forest.seeds_) == 40 and len(set(forest.seeds_)) == 40


def test_forest_is_identical_for_n_jobs_and_shards(small_forest):
    wide, X, forest = small_forest
    kw = dict(model=NormalNodeModel(3), trees=40, seed=11)
    par = grow_forest(wide, X, [0, 1, 2], n_jobs=2, **kw)
    assert par.to_json() == forest.to_json()
    assert par.importance().equals(forest.importance())
    shards = [grow_forest(wide, X, [0, 1, 2], tree_indices=[i for i in range(40) if i % 4 == s], **kw)
              for s in range(4)]
    merged = Forest.merge(shards[::-1])
    assert merged.to_json() == forest.to_json()
    with pytest.raises(ModelError):
        Forest.merge([shards[0], shards[0]])


def test_dependence_and_prediction(small_forest):
    wide, X, forest = small_forest
    dep = forest.dependence("x1", [-1.0, 1.0])
    assert list(dep.columns) == ["value", "time", "expected", "sd"]
    lo = dep[dep["value"] == -1.0]["expected"].to_numpy()
    hi = dep[dep["value"] == 1.0]["expected"].to_numpy()
    # true shift 0.8 above x1 = 0.3; a forest with mtry < m shrinks it (trees not using x1)
    assert np.all(hi - lo > 0.2)
    cat = forest.dependence("cat")
    assert sorted(set(cat["value"])) == ["a", "b", "c", "d"]
    pred = forest.predict(X.iloc[:5])
    assert pred.shape == (5, 3)
    # averaging the predictions of everyone with x1 set equals the partial dependence
    two = forest.dependence2("x1", "cat", [-1.0, 1.0], ["a", "b"])
    assert len(two) == 2 * 2 * 3
    with pytest.raises(DataError):
        forest.dependence("nope")
    with pytest.raises(DataError):
        forest.dependence("cat", ["zz"])


def test_pair_table_of_the_forest_stage(small_forest):
    from wavetrail.errors import ConfigError
    from wavetrail.stages.forest import PAIR_COLUMNS, _check_pairs, pair_table

    wide, X, forest = small_forest
    inter = pd.DataFrame({"predictor_a": ["cat", "x1"], "predictor_b": ["x1", "x2"], "h": [0.2, 0.0]})
    chosen = pair_table(forest, X, [("x1", "cat")], inter)
    assert list(chosen.columns) == PAIR_COLUMNS
    assert len(chosen) == 3 * 4 * 3  # low / average / high x four categories x three waves
    assert list(dict.fromkeys(chosen["level_a"])) == ["low", "average", "high"]
    x1 = X["x1"]
    np.testing.assert_allclose(sorted(set(chosen["value_a"])), [x1.mean() - x1.std(), x1.mean(), x1.mean() + x1.std()])
    two = forest.dependence2("x1", "cat", sorted(set(chosen["value_a"])), ["a", "b", "c", "d"])
    np.testing.assert_array_equal(chosen["expected"].to_numpy(), two["expected"].to_numpy())
    # no pair named: the strongest probed pair; nothing when no pair interacts
    assert set(pair_table(forest, X, [], inter)["predictor_a"]) == {"cat"}
    assert pair_table(forest, X, [], inter.assign(h=0.0)).empty
    with pytest.raises(ConfigError, match="'nope'"):
        _check_pairs([("x1", "nope")], forest.info_.names)


def test_h_statistic_zero_for_additive_and_positive_for_interacting():
    rng = np.random.default_rng(9)
    n = 1500
    X = pd.DataFrame(rng.normal(size=(n, 4)), columns=list("abcd"))
    inter = ((X["a"] > 0) & (X["b"] > 0)).to_numpy() * 1.2
    add = (X["c"] > 0).to_numpy() * 1.0
    Y = rng.normal(size=(n, 2)) + (inter + add)[:, None]
    forest = grow_forest(pd.DataFrame(Y), X, [0, 1], model=NormalNodeModel(2), trees=30, seed=2,
                         mtry=4, min_size=40)
    h = forest.interactions(pairs=[("a", "b"), ("a", "c"), ("c", "d")])
    hv = dict(zip(zip(h["predictor_a"], h["predictor_b"]), h["h"]))
    assert hv[("a", "b")] > 0.2
    assert hv[("a", "b")] > 2 * hv[("a", "c")]
    assert hv[("c", "d")] < 0.1


# ---------------------------------------------------------------- JSON

def test_json_round_trip_is_exact_and_safe(small_forest):
    _, X, forest = small_forest
    text = forest.to_json()
    again = Forest.from_json(text)
    assert again.to_json() == text
    assert again.importance().equals(forest.importance())
    again.attach_background(X)
    assert np.allclose(again.predict(X.iloc[:4]).to_numpy(), forest.predict(X.iloc[:4]).to_numpy())
    d = json.loads(text)
    assert d["schema"] == "wavetrail-forest/1" and "format" not in d
    assert d["settings"]["split"] == "scores"
    assert all("predictor" in n and "feature" not in n for t in d["trees"] for n in t["nodes"])
    with pytest.raises(DataError):
        Forest.from_json("{not json")
    with pytest.raises(DataError):
        Forest.from_json(json.dumps({"schema": "something-else"}))
    del d["trees"][0]["nodes"][0]["theta"]
    with pytest.raises(DataError, match="lacks"):
        Forest.from_json(json.dumps(d))


def test_a_forest_file_of_the_earlier_layout_reads_with_todays_names(small_forest):
    _, X, forest = small_forest
    d = json.loads(forest.to_json())
    # the earlier layout: "format" for "schema", a node's "feature" for "predictor", split "score"
    d["format"] = d.pop("schema")
    d["settings"]["split"] = "score"
    for t in d["trees"]:
        for n in t["nodes"]:
            n["feature"] = n.pop("predictor")
    again = Forest.from_json(json.dumps(d))
    assert again.to_json() == forest.to_json()
    assert again.importance().equals(forest.importance())


def test_earlier_split_names_still_work_for_one_version_with_a_warning():
    wide, X = _panel()
    new = grow_tree(wide, X, [0, 1, 2], model=NormalNodeModel(3), split="likelihood_ratio")
    with pytest.warns(DeprecationWarning, match="likelihood_ratio"):
        old = grow_tree(wide, X, [0, 1, 2], model=NormalNodeModel(3), split="likelihood")
    assert old.splits_.equals(new.splits_)


def test_bad_inputs_raise_wavetrail_errors():
    wide, X = _panel(n=100)
    with pytest.raises(DataError):
        grow_tree(wide, X.iloc[:50].set_index(pd.RangeIndex(1000, 1050)), [0, 1, 2], model=NormalNodeModel(3))
    with pytest.raises(DataError):
        grow_tree(wide, X, [0, 1], model=NormalNodeModel(3))
    with pytest.raises(DataError):
        grow_tree(wide, X.assign(when=pd.Timestamp("2020-01-01")), [0, 1, 2], model=NormalNodeModel(3))
    with pytest.raises(WavetrailError):
        grow_forest(wide, X, [0, 1, 2], model=NormalNodeModel(3), trees=2, mtry=99)
