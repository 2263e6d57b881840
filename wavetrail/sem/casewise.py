"""Person-level pieces for score-based tests: casewise log-likelihoods and scores.

At the ML estimate the casewise scores sum to (numerically) zero; their outer
product ``sum_i s_i s_i^T`` is the outer-product-of-gradients estimate of the
information used to scale the cumulative score process (Zeileis & Hornik 2007,
Statistica Neerlandica 61(4); Merkle & Zeileis 2013, Psychometrika 78(1)).
"""

from __future__ import annotations

import numpy as np

from wavetrail.sem.likelihood import casewise, evaluate


def _rows(spec, Y):
    if hasattr(Y, "loc"):
        Y = Y[spec.observed].to_numpy(dtype=float)
    return np.asarray(Y, dtype=float)


def casewise_scores(spec, theta, Y) -> np.ndarray:
    """Gradient of each person's log-likelihood at ``theta`` (n, k); FIML (observed entries only).

    ``Y`` is an (n, p) array in ``spec.observed`` order or a DataFrame holding those columns.
    """
    return casewise(spec.compile(), np.asarray(theta, dtype=float), _rows(spec, Y))[1]


def casewise_loglik(spec, theta, Y) -> np.ndarray:
    """Each person's log-likelihood at ``theta`` (n,); zero for a row with nothing observed."""
    return casewise(spec.compile(), np.asarray(theta, dtype=float), _rows(spec, Y), scores=False)[0]


def information(spec, theta, stats) -> np.ndarray:
    """Expected (Fisher) information of the whole sample, (k, k) or (B, k, k) for stacked theta."""
    theta = np.asarray(theta, dtype=float)
    I = evaluate(spec.compile(), np.atleast_2d(theta), stats, grad=False, info=True)[1]
    return I[0] if theta.ndim == 1 else I


def score_outer(scores) -> np.ndarray:
    """Outer-product-of-gradients information ``S^T S`` (k, k) from casewise scores (n, k)."""
    S = np.asarray(scores, dtype=float)
    return S.T @ S
