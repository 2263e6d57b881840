"""Admissible (bounded) maximum likelihood: variances >= 0 and a PSD latent covariance block.

The bounded fit maximises the same FIML log-likelihood over the admissible set

* every free residual variance ``theta_jj >= 0``,
* the covariance matrix of a chosen block of latent variables (the growth factors)
  positive semi-definite,

by writing the block as ``Psi = C C^T`` with ``C`` lower triangular and ``C_ii >= 0``
(the parametrisation of mixed-model software, e.g. Bates et al. 2015, Journal of
Statistical Software 67(1)) and keeping the residual variances themselves as box-bounded
parameters. L-BFGS-B (Byrd, Lu, Nocedal & Zhu 1995, SIAM J. Sci. Comput. 16(5)) runs in
coordinates scaled by the Fisher information at the start (roughly standard-error units),
so its tolerances mean the same on any scale of the data. Bounds are exact: a variance can
end at 0 and ``C`` can end singular (a boundary estimate).

A seeded multistart (the projections of the given starts onto the admissible set, and
perturbed copies) guards against local maxima; the highest end is returned.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import optimize

from wavetrail.sem.likelihood import evaluate
from wavetrail.sem.spec import PSI, THETA


@dataclass
class BoundedResult:
    theta: np.ndarray
    loglik: float
    converged: bool
    boundary: list  # names of the bounds that are active at the end
    pgrad: float  # largest projected gradient in scaled units at the end
    n_starts: int
    maxima: list  # distinct log-likelihoods reached (highest first)


class _Map:
    """theta <-> phi for one spec: identity except residual variances (box-bounded) and the
    Cholesky factor of the latent block."""

    def __init__(self, spec, block):
        cm = spec.compile()
        self.cm, self.k = cm, cm.k
        self.block = list(block)
        q = len(self.block)
        pos = {f: i for i, f in enumerate(self.block)}
        self.var_params = sorted({e.param for e in cm.entries
                                  if e.matrix == THETA and e.row == e.col and e.param >= 0})
        # every (r, c) of the block must be a distinct free parameter
        self.tri = []  # (i, j, param) with i >= j in block positions
        seen = set()
        for e in cm.entries:
            if e.matrix == PSI and e.param >= 0 and e.row in pos and e.col in pos:
                i, j = sorted((pos[e.row], pos[e.col]), reverse=True)
                if e.param in seen:
                    raise ValueError("the bounded latent block needs distinct parameters")
                seen.add(e.param)
                self.tri.append((i, j, e.param))
        if len(self.tri) != q * (q + 1) // 2:
            raise ValueError("the bounded latent block must have every variance and covariance free")
        self.q = q
        self.names = cm.names

    def to_theta(self, phi):
        theta = phi.copy()
        if self.q:
            C = np.zeros((self.q, self.q))
            for i, j, a in self.tri:
                C[i, j] = phi[a]
            P = C @ C.T
            for i, j, a in self.tri:
                theta[a] = P[i, j]
        return theta

    def jac(self, phi):
        """d theta / d phi (k, k)."""
        J = np.eye(self.k)
        if self.q:
            C = np.zeros((self.q, self.q))
            for i, j, a in self.tri:
                C[i, j] = phi[a]
            for _, _, a in self.tri:
                J[a, a] = 0.0
            for r, c, a in self.tri:  # theta_a = P[r, c] = sum_l C[r, l] C[c, l]
                for i, j, b in self.tri:  # d / d C[i, j]
                    d = (C[c, j] if r == i else 0.0) + (C[r, j] if c == i else 0.0)
                    J[a, b] = d
        return J

    def from_theta(self, theta):
        """An admissible phi near theta: variances clipped at 0, the block projected to PSD."""
        phi = np.asarray(theta, dtype=float).copy()
        for a in self.var_params:
            phi[a] = max(phi[a], 0.0)
        if self.q:
            P = np.zeros((self.q, self.q))
            for i, j, a in self.tri:
                P[i, j] = P[j, i] = theta[a]
            w, V = np.linalg.eigh(P)
            scale = max(abs(w).max(), 1e-12)
            P = (V * np.maximum(w, 1e-6 * scale)) @ V.T
            C = np.linalg.cholesky(P)
            for i, j, a in self.tri:
                phi[a] = C[i, j]
        return phi

    def bounds(self):
        lo = np.full(self.k, -np.inf)
        for a in self.var_params:
            lo[a] = 0.0
        for i, j, a in self.tri:
            if i == j:
                lo[a] = 0.0
        return lo


def _fit_one(mp, stats, phi0, scale, max_iter):
    cm = mp.cm
    lo = mp.bounds()

    def f(z):
        phi = z * scale
        theta = mp.to_theta(phi)
        ll, g = evaluate(cm, theta[None], stats, info=False)
        if not np.isfinite(ll[0]):
            return 1e300, np.zeros_like(z)
        gphi = mp.jac(phi).T @ g[0]
        return -float(ll[0]), -(gphi * scale)

    z0 = phi0 / scale
    bnds = [(l / s if np.isfinite(l) else None, None) for l, s in zip(lo, scale)]
    res = optimize.minimize(f, z0, jac=True, method="L-BFGS-B", bounds=bnds,
                            options={"maxiter": max_iter, "ftol": 1e-16, "gtol": 1e-10, "maxcor": 30})
    z = res.x
    val, grad = f(z)
    # projected gradient (scaled): a coordinate at its lower bound only counts if it points inward
    zl = np.array([b[0] if b[0] is not None else -np.inf for b in bnds])
    at = z <= zl + 1e-12
    pg = np.where(at, np.minimum(grad, 0.0), grad)
    return z * scale, -val, float(np.abs(pg).max()) if len(pg) else 0.0, at


def fit_bounded(spec, stats, block, starts, n_random=4, seed=0, max_iter=2000) -> BoundedResult:
    """Highest admissible maximum from ``starts`` (list of (k,) theta) and ``n_random`` seeded
    perturbations of the first projected start."""
    from wavetrail.sem.search import perturbed_starts

    mp = _Map(spec, block)
    cm = mp.cm
    phis = [mp.from_theta(np.asarray(s, dtype=float)) for s in starts if s is not None]
    # scale: 1 / sqrt of the diagonal of the Fisher information in phi at the first start
    th0 = mp.to_theta(phis[0])
    _, _, I = evaluate(cm, th0[None], stats, grad=True, info=True)
    J = mp.jac(phis[0])
    d = np.diag(J.T @ I[0] @ J)
    scale = 1.0 / np.sqrt(np.where(d > 1e-12 * max(d.max(), 1e-300), d, np.nan))
    scale = np.where(np.isfinite(scale), scale, np.nanmedian(scale) if np.isfinite(scale).any() else 1.0)
    rng = np.random.default_rng(seed)
    if n_random:
        base_th = [mp.to_theta(p) for p in phis]
        for th in base_th[:1]:
            phis.extend(mp.from_theta(t) for t in perturbed_starts(spec, th, n_random, rng))
    ends = []
    for phi in phis:
        th = mp.to_theta(phi)
        if not np.isfinite(evaluate(cm, th[None], stats, grad=False, info=False)[0]):
            continue
        ends.append(_fit_one(mp, stats, phi, scale, max_iter))
    ends.sort(key=lambda e: -e[1])
    phi, ll, pg, at = ends[0]
    theta = mp.to_theta(phi)
    boundary = [mp.names[a] for a in mp.var_params if at[a]]
    if mp.q:
        P = np.zeros((mp.q, mp.q))
        for i, j, a in mp.tri:
            P[i, j] = P[j, i] = theta[a]
        w = np.linalg.eigvalsh(P)
        if w[0] <= 1e-8 * max(abs(w).max(), 1e-300):
            boundary.append("latent covariance (singular)")
    maxima: list = []
    for e in ends:
        if not any(abs(e[1] - m) <= max(1e-6 * abs(m), 1e-3) for m in maxima):
            maxima.append(e[1])
    return BoundedResult(theta=theta, loglik=float(ll), converged=bool(pg < 1e-3), boundary=boundary,
                         pgrad=pg, n_starts=len(ends), maxima=maxima)
