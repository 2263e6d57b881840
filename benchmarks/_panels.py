"""The simulated panel shared by the benchmarks (imported by the scripts beside it).

A benchmark runs as ``python benchmarks/bench_x.py``, so this folder is first on
``sys.path`` and ``from _panels import simulate`` finds this module.
"""

from __future__ import annotations

import numpy as np


def simulate(n=1000, waves=5, miss=0.2, seed=20261202):
    """Quadratic growth data (fixed seed): wave times ``t`` and the people x waves matrix ``Y``."""
    rng = np.random.default_rng(seed)
    t = np.arange(float(waves))
    L = np.c_[np.ones(waves), t, t ** 2]
    eta = rng.multivariate_normal([2.0, 0.4, -0.04], [[0.8, 0.05, 0.0], [0.05, 0.1, 0.0], [0.0, 0.0, 0.004]], n)
    Y = eta @ L.T + rng.normal(0, 0.5, (n, waves))
    Y[rng.random((n, waves)) < miss] = np.nan
    return t, Y
