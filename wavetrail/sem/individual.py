"""ML/FIML with person-specific fixed matrices (e.g. each person's own time scores).

When the fixed part of the model differs between people -- a growth model whose
loadings are each person's own ages -- the sample is no longer summarised by
per-pattern sufficient statistics. Each person then forms a "sample" of one:
the per-person statistics are stacked along the batch axis of
:class:`~wavetrail.sem.stats.SuffStats`, the batched likelihood of
:func:`wavetrail.sem.likelihood.evaluate` is evaluated with one shared parameter
vector and that person's fixed matrices, and the log-likelihood, gradient and
expected information are summed over people (definition variables; Mehta &
West 2000, Psychological Methods 5(1); Mehta & Neale 2005, Psychological
Methods 10(3)).

The optimiser is Fisher scoring with step halving on the summed quantities;
standard errors come from the observed information (central differences of the
summed analytic gradient), as in :mod:`wavetrail.sem.fitting`. Like the rest of
the engine the estimation is unrestricted: negative variances are allowed as
long as every person's implied covariance stays positive definite.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from wavetrail.errors import ModelError
from wavetrail.sem.likelihood import evaluate
from wavetrail.sem.stats import SuffStats, pattern_index, person_terms

#: people per block when evaluating (bounds memory: block * patterns * p * p)
BLOCK = 4096


@dataclass
class IndividualFit:
    """Result of :func:`fit_individual`.

    theta (k,), loglik float, converged bool, n_iter int, vcov (k, k) (NaN when the
    information is singular), n int (people with any observation), decrement float
    """

    theta: np.ndarray
    loglik: float
    converged: bool
    n_iter: int
    vcov: np.ndarray
    n: int
    decrement: float


def person_stats(Y) -> tuple[SuffStats, np.ndarray]:
    """Per-person statistics (B = people with any observation) and the rows kept."""
    masks, idx = pattern_index(Y)
    keep = np.nonzero(idx >= 0)[0]
    _, x, xx = person_terms(Y[keep], masks, idx[keep])
    stats = SuffStats.from_groups(masks, idx[keep], x, xx, np.arange(len(keep)), len(keep))
    return stats, keep


class _Summed:
    """Summed log-likelihood, gradient and information over people, in blocks."""

    def __init__(self, cm, stats, base):
        self.cm, self.stats, self.base = cm, stats, base
        B = stats.B
        self.blocks = [(lo, min(lo + BLOCK, B)) for lo in range(0, B, BLOCK)]

    def _base(self, lo, hi):
        return {key: (val if np.shape(val)[0] == 1 else val[lo:hi]) for key, val in self.base.items()}

    def __call__(self, theta, grad=True, info=True):
        cm, k = self.cm, self.cm.k
        ll, g, I = 0.0, np.zeros(k), np.zeros((k, k))
        for lo, hi in self.blocks:
            th = np.broadcast_to(theta, (hi - lo, k))
            out = evaluate(cm, th, self.stats.take(slice(lo, hi)), grad=grad, info=info, base=self._base(lo, hi))
            if not (grad or info):
                out = (out,)
            l_b = out[0]
            if not np.all(np.isfinite(l_b)):
                return -np.inf, None, None
            ll += float(l_b.sum())
            if grad:
                g += out[1].sum(axis=0)
            if info:
                I += out[-1].sum(axis=0)
        return ll, (g if grad else None), (I if info else None)


def fit_individual(spec, Y, base, start, max_iter=500, tol=1e-10, max_halvings=40, where="data") -> IndividualFit:
    """Fit ``spec`` by ML when some fixed matrices differ between people.

    Parameters
    ----------
    spec : ModelSpec
    Y : array (n, p), NaN = missing
    base : dict matrix code -> array with a leading axis of size n (person-specific)
        or 1 (shared); the fixed part of every matrix (see ``Compiled.matrices``)
    start : (k,) starting values (e.g. the fit with each wave's average time score)

    Returns
    -------
    IndividualFit
    """
    cm = spec.compile()
    Y = np.asarray(Y, dtype=float)
    stats, keep = person_stats(Y)
    base = {key: (np.asarray(val) if np.shape(val)[0] == 1 else np.asarray(val)[keep]) for key, val in base.items()}
    f = _Summed(cm, stats, base)
    theta = np.asarray(start, dtype=float).copy()
    ll, g, I = f(theta)
    if not np.isfinite(ll):
        raise ModelError(f"{where}: the starting values imply a covariance that is not positive definite "
                         "for some person", hint="check the person-specific time scores for extreme values")
    converged, dec, it = False, np.inf, 0
    for it in range(1, max_iter + 1):
        try:
            d = np.linalg.solve(I, g)
        except np.linalg.LinAlgError:
            d = np.linalg.lstsq(I, g, rcond=None)[0]
        dec = float(g @ d)
        if np.isfinite(dec) and dec < tol:
            converged = True
            break
        step, moved = 1.0, False
        for _ in range(max_halvings):
            cand = theta + step * d
            l_c = f(cand, grad=False, info=False)[0]
            if np.isfinite(l_c) and l_c >= ll + 1e-4 * step * max(dec, 0.0) - 1e-12 * abs(ll):
                theta, moved = cand, True
                break
            step *= 0.5
        if not moved:  # no step improves: at the optimum to machine precision, or stuck
            converged = bool(dec < 1e3 * tol + 1e-7 * abs(ll))
            break
        ll, g, I = f(theta)
    vcov = _observed_vcov(f, theta)
    return IndividualFit(theta=theta, loglik=float(ll), converged=converged, n_iter=it, vcov=vcov,
                         n=int(stats.B), decrement=dec)


def _observed_vcov(f, theta):
    """Inverse of the observed information (central differences of the summed gradient)."""
    k = len(theta)
    h = 1e-5 * np.maximum(np.abs(theta), 1.0)
    H = np.zeros((k, k))
    for a in range(k):
        e = np.zeros(k)
        e[a] = h[a]
        gp = f(theta + e, info=False)[1]
        gm = f(theta - e, info=False)[1]
        if gp is None or gm is None:
            return np.full((k, k), np.nan)
        H[a] = (gp - gm) / (2 * h[a])
    I = -0.5 * (H + H.T)
    ev = np.linalg.eigvalsh(I)
    if ev[0] <= 1e-10 * max(abs(ev[-1]), 1e-300):
        return np.full((k, k), np.nan)
    return np.linalg.inv(I)
