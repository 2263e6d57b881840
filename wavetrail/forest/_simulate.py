"""Simulated panels with known moderators (for tests, benchmarks and the docs).

A growth panel: person ``i`` has intercept ``a_i``, slope ``b_i`` and, for the
quadratic shape, curvature ``c_i``; wave ``t`` is ``a_i + b_i t + c_i t^2 + e``.
Four true moderators act on the person's coefficients; everything else is noise:

* ``lin_intercept`` (numeric): the mean intercept rises linearly with it;
* ``step_slope`` (numeric): the mean slope is higher above a threshold;
* ``group`` (unordered, levels a/b/c): level ``b`` has a higher mean intercept;
* ``spread_slope`` (numeric): only the spread of the slopes changes (small
  below zero, large above); the mean slope does not.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

TRUE_MODERATORS = ("lin_intercept", "step_slope", "group", "spread_slope")


def simulate_panel(n: int = 1000, waves: int = 5, n_noise: int = 20, shape: str = "linear",
                   seed: int = 0, moderators: bool = True, missing: float = 0.1,
                   strength: float = 1.0):
    """Return ``(wide, predictors, time_scores)`` of a simulated moderated growth panel."""
    rng = np.random.default_rng(seed)
    times = np.arange(waves, dtype=float)
    cols = {}
    for name in ("lin_intercept", "step_slope", "spread_slope"):
        cols[name] = rng.normal(size=n)
    cols["group"] = pd.Categorical(rng.choice(["a", "b", "c"], size=n), categories=["a", "b", "c"])
    for j in range(n_noise):
        kind = j % 4
        if kind == 3:
            cols[f"noise{j:02d}"] = pd.Categorical(
                rng.choice(["low", "mid", "high"], size=n), categories=["low", "mid", "high"], ordered=True)
        elif kind == 2:
            cols[f"noise{j:02d}"] = rng.integers(0, 2, size=n).astype(float)
        else:
            cols[f"noise{j:02d}"] = rng.normal(size=n)
    X = pd.DataFrame(cols, index=pd.RangeIndex(n, name="id"))
    s = strength if moderators else 0.0
    mean_a = 2.0 + s * 0.35 * X["lin_intercept"].to_numpy() + s * 0.5 * (X["group"] == "b").to_numpy()
    mean_b = 0.3 + s * 0.3 * (X["step_slope"].to_numpy() > 0.5)
    sd_b = np.where(X["spread_slope"].to_numpy() > 0, 0.2 + s * 0.3, 0.2) if moderators else np.full(n, 0.2)
    a = mean_a + rng.normal(scale=0.7, size=n)
    b = mean_b + sd_b * rng.normal(size=n)
    Y = a[:, None] + b[:, None] * times[None, :]
    if shape == "quadratic":
        c = -0.03 + 0.03 * rng.normal(size=n)
        Y = Y + c[:, None] * times[None, :] ** 2
    Y = Y + rng.normal(scale=0.5, size=Y.shape)
    if missing > 0:
        drop = rng.random(Y.shape) < missing
        drop[:, 0] &= rng.random(n) < 0.3  # the first wave is mostly present
        Y[drop] = np.nan
        Y[np.isnan(Y).all(axis=1), 0] = a[np.isnan(Y).all(axis=1)]
    wide = pd.DataFrame(Y, index=X.index, columns=[f"w{t + 1}" for t in range(waves)])
    # a little missingness in two noise predictors and one true moderator
    for name in [c for c in X.columns if c.startswith("noise")][:2] + ["lin_intercept"]:
        X.loc[rng.random(n) < 0.05, name] = np.nan
    return wide, X, list(times)
