"""Out-of-bag permutation importance of each predictor.

For tree ``b`` with out-of-bag people ``O_b`` (not in its subsample), each person
is scored by the log-likelihood of their waves under the model of the leaf they
fall into. Permuting predictor ``j`` among ``O_b`` re-routes people; the
importance of ``j`` in tree ``b`` is the mean drop in that log-likelihood per
out-of-bag person,

    D_bj = (1 / |O_b|) * sum_{i in O_b} [ l_i(leaf_b(x_i)) - l_i(leaf_b(x_i with x_j permuted)) ].

A leaf whose model did not converge or is inadmissible (a negative variance, a
correlation beyond +-1: common in small nodes fitted without bounds) scores its
people under the model of its nearest admissible ancestor
(:meth:`wavetrail.forest.tree.Tree.scoring_nodes`); otherwise one such leaf's
near-singular covariance can make a single tree's drop millions of times larger
than the others'.

A tree that never splits on ``j`` has ``D_bj = 0`` exactly. A predictor that
was never tested at any node (too small nodes, too few people in a category,
no variation) has a missing importance instead, since 0 would read as "no
association". The forest
importance is the mean of ``D_bj`` over trees and its standard error the
standard deviation over trees divided by the square root of the number of trees.

References
----------
.. [1] Brandmaier, A. M., Prindle, J. J., McArdle, J. J., & Lindenberger, U.
   (2016). Theory-guided exploration with structural equation model forests.
   Psychological Methods, 21(4), 566-582.
.. [2] Strobl, C., Boulesteix, A.-L., Zeileis, A., & Hothorn, T. (2007). Bias in
   random forest variable importance measures. BMC Bioinformatics, 8, 25.
"""

from __future__ import annotations

import numpy as np
import pandas as pd


def oob_drop(tree, model, Y_oob: np.ndarray, X_oob: np.ndarray, rng: np.random.Generator) -> np.ndarray:
    """Per-predictor mean drop in out-of-bag log-likelihood for one tree, shape (m,)."""
    m = X_oob.shape[1]
    drop = np.zeros(m)
    n = X_oob.shape[0]
    used = tree.used_predictors
    if n == 0 or len(used) == 0:
        return drop
    leaves = tree.leaves
    scorer = tree.scoring_nodes(model)
    L = np.column_stack([model.loglik(tree.theta_[scorer[leaf]], Y_oob) for leaf in leaves])
    pos = np.full(len(tree.nodes), -1, dtype=np.int64)
    pos[leaves] = np.arange(len(leaves))
    ar = np.arange(n)
    base = L[ar, pos[tree.apply(X_oob)]]
    for j in used:
        Xp = X_oob.copy()
        Xp[:, j] = X_oob[rng.permutation(n), j]
        drop[j] = float(np.mean(base - L[ar, pos[tree.apply(Xp)]]))
    return drop


def untested_text(row) -> str:
    """Why a predictor could not be tested at some nodes, e.g. 'node size 40; no variation 3'."""
    parts = [(label, int(row[key])) for key, label in
             (("node_size", "node size"), ("small_category", "too few people in a category"),
              ("no_variation", "no variation")) if int(row[key]) > 0]
    return "; ".join(f"{label} {count}" for label, count in parts)


def importance_table(names: list[str], drops: np.ndarray, testing: pd.DataFrame | None = None) -> pd.DataFrame:
    """Tidy importance table from a (trees, m) drop matrix.

    Columns predictor, importance, se, rank and, with ``testing`` (see
    :meth:`wavetrail.forest.Forest.testing`), tested and candidate node counts
    and ``untested`` (reasons with node counts). A predictor never tested has
    missing importance, se and rank and is listed after the ranked ones.
    """
    T = drops.shape[0]
    imp = drops.mean(axis=0) if T else np.zeros(len(names))
    se = drops.std(axis=0, ddof=1) / np.sqrt(T) if T > 1 else np.full(len(names), np.nan)
    df = pd.DataFrame({"predictor": names, "importance": imp, "se": se})
    if testing is not None:
        tested = testing["tested"].to_numpy()
        df.loc[tested == 0, ["importance", "se"]] = np.nan
        df["tested"] = tested
        df["candidate"] = testing["candidate"].to_numpy()
        df["untested"] = [untested_text(r) for _, r in testing.iterrows()]
    vals = df["importance"].to_numpy(dtype=float)
    order = sorted(range(len(names)), key=lambda j: (np.isnan(vals[j]), -np.nan_to_num(vals[j]), names[j]))
    df = df.iloc[order].reset_index(drop=True)
    ranked = ~np.isnan(df["importance"].to_numpy(dtype=float))
    rank = np.full(len(df), np.nan)
    rank[ranked] = np.arange(1, ranked.sum() + 1)
    df.insert(3, "rank", rank)
    return df
