"""Expected trajectories by partial dependence.

The expected trajectory at predictor value ``v`` is the model-implied mean of
each wave, averaged over the trees and over background people with their
other predictors as observed and predictor ``j`` set to ``v``:

    E_j(v) = (1 / B) sum_b (1 / n) sum_i mu(leaf_b(x_i with x_ij = v)),

where ``mu(leaf)`` is the implied mean vector of the leaf's growth model
(Friedman, 2001, partial dependence). Two predictors set jointly give the
two-way table.

The spread of individual trajectories around it is the standard deviation of the
same mixture of leaf models: with ``s2(leaf)`` the implied variance of each wave
(of the nearest admissible ancestor when the leaf's estimate is inadmissible, see
:meth:`wavetrail.forest.tree.Tree.scoring_nodes`),
``SD_j(v)^2 = mean[s2 + mu^2] - E_j(v)^2`` over the same trees and people. A
predictor that moderates only the variance of the slopes leaves ``E_j`` flat and
widens or narrows ``SD_j`` over time.

References
----------
.. [1] Friedman, J. H. (2001). Greedy function approximation: a gradient boosting
   machine. Annals of Statistics, 29(5), 1189-1232.
"""

from __future__ import annotations

import numpy as np


def tree_expected(tree, model) -> np.ndarray:
    """Implied means of every node of a tree, (n_nodes, p) (cached on the tree)."""
    cached = getattr(tree, "_expected", None)
    if cached is None:
        cached = np.array([model.expected(th) for th in tree.theta_])
        tree._expected = cached
    return cached


def tree_second(tree, model) -> np.ndarray:
    """Implied second moments ``var + mean^2`` of each wave at every node, (n_nodes, p) (cached)."""
    cached = getattr(tree, "_second", None)
    if cached is None:
        mu = tree_expected(tree, model)
        scorer = tree.scoring_nodes(model)
        var = np.array([model.implied_variance(tree.theta_[j]) for j in scorer])
        cached = var + mu * mu
        tree._second = cached
    return cached


def background_rows(n: int, cap: int = 500) -> np.ndarray:
    """Evenly spaced row positions of at most ``cap`` background people (deterministic)."""
    if n <= cap:
        return np.arange(n)
    return np.unique(np.round(np.linspace(0, n - 1, cap)).astype(np.int64))


def partial_dependence(trees, model, X_bg: np.ndarray, settings: list[tuple[int, np.ndarray]],
                       spread: bool = False):
    """Mean expected trajectory for a grid of joint settings.

    ``settings`` is a list of ``(column, values)`` with values of equal length
    ``V`` (one grid point per position). Returns (V, p); with ``spread=True``
    also the (V, p) standard deviation of individual trajectories.
    """
    cols = [c for c, _ in settings]
    V = len(settings[0][1])
    nb = X_bg.shape[0]
    p = model.p
    out = np.zeros((V, p))
    second = np.zeros((V, p))
    Xg = np.tile(X_bg, (V, 1))
    for c, vals in settings:
        Xg[:, c] = np.repeat(np.asarray(vals, dtype=float), nb)
    for tree in trees:
        E = tree_expected(tree, model)
        M2 = tree_second(tree, model) if spread else None
        if np.intersect1d(tree.used_predictors, cols).size == 0:
            leaf = tree.apply(X_bg)
            out += E[leaf].mean(axis=0)[None, :]
            if spread:
                second += M2[leaf].mean(axis=0)[None, :]
        else:
            leaf = tree.apply(Xg)
            out += E[leaf].reshape(V, nb, p).mean(axis=1)
            if spread:
                second += M2[leaf].reshape(V, nb, p).mean(axis=1)
    B = max(len(trees), 1)
    out /= B
    if not spread:
        return out
    sd = np.sqrt(np.maximum(second / B - out * out, 0.0))
    return out, sd
