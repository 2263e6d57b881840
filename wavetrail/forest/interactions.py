"""Interaction strength of predictor pairs: Friedman & Popescu's H on trajectories.

For predictors ``a`` and ``b``, with centred partial dependence functions
``F_ab``, ``F_a`` and ``F_b`` evaluated at the observed value pairs of
evaluation people ``i`` and summed over the waves ``t`` of the expected
trajectory,

    H^2_ab = sum_{i,t} [F_ab(x_ia, x_ib)_t - F_a(x_ia)_t - F_b(x_ib)_t]^2 / sum_{i,t} F_ab(x_ia, x_ib)_t^2,

and the table reports ``h = sqrt(H^2)`` (0: additive effects; near 1: the joint
effect is mostly interaction). Partial dependences are averaged over
background people; a tree that uses neither predictor adds a constant that
centring removes, so only trees using ``a`` or ``b`` are routed.

References
----------
.. [1] Friedman, J. H., & Popescu, B. E. (2008). Predictive learning via rule
   ensembles. Annals of Applied Statistics, 2(3), 916-954.
"""

from __future__ import annotations

import numpy as np

from wavetrail.forest.dependence import tree_expected


def _pd_points(trees, model, X_bg, cols, values) -> np.ndarray:
    """Partial dependence (summed over trees, not yet averaged) at per-point settings.

    ``values`` is (V, len(cols)); returns (V, p).
    """
    V = values.shape[0]
    nb = X_bg.shape[0]
    p = model.p
    Xg = np.tile(X_bg, (V, 1))
    for c_i, c in enumerate(cols):
        Xg[:, c] = np.repeat(values[:, c_i], nb)
    out = np.zeros((V, p))
    for tree in trees:
        E = tree_expected(tree, model)
        out += E[tree.apply(Xg)].reshape(V, nb, p).mean(axis=1)
    return out


def h_statistic(trees, model, X_bg: np.ndarray, X_eval: np.ndarray, a: int, b: int) -> float:
    """Friedman-Popescu H (square root of H^2) of columns ``a`` and ``b``."""
    keep = ~np.isnan(X_eval[:, a]) & ~np.isnan(X_eval[:, b])
    pts = X_eval[keep][:, [a, b]]
    if pts.shape[0] < 2:
        return float("nan")
    use = [t for t in trees if np.isin([a, b], t.used_predictors).any()]
    if not use:
        return 0.0
    T = len(trees)
    f_ab = _pd_points(use, model, X_bg, [a, b], pts) / T
    f_a = _pd_points(use, model, X_bg, [a], pts[:, :1]) / T
    f_b = _pd_points(use, model, X_bg, [b], pts[:, 1:]) / T
    f_ab -= f_ab.mean(axis=0)
    f_a -= f_a.mean(axis=0)
    f_b -= f_b.mean(axis=0)
    den = float(np.sum(f_ab ** 2))
    if den <= 1e-300:
        return 0.0
    h = float(np.sqrt(np.sum((f_ab - f_a - f_b) ** 2) / den))
    # rounding noise of an exactly additive pair is reported as 0
    return 0.0 if h < 1e-9 else h
