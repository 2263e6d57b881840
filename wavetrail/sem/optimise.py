"""Batched maximum likelihood: starting values and Fisher scoring over stacked models.

:func:`fit_batch` fits ``B`` models of one :class:`~wavetrail.sem.ModelSpec` at
once, one per sample of a :class:`~wavetrail.sem.SuffStats`. Each iteration
takes a Fisher-scoring step ``I^-1 g`` for every still-active model and halves
it, per model, until the log-likelihood rises (Armijo condition) and every
pattern's implied covariance stays positive definite. Python overhead is paid
per iteration, never per model.

Convergence: the scoring decrement ``g^T I^-1 g`` (twice the predicted
remaining gain in log-likelihood) falls below ``tol``.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from wavetrail.sem.likelihood import _chol_logdet_inv, evaluate
from wavetrail.sem.spec import ALPHA, BETA, LAMBDA, NU, PSI, THETA


@dataclass
class BatchFit:
    """Result of :func:`fit_batch`.

    Attributes
    ----------
    theta : (B, k) estimates
    loglik : (B,) maximised log-likelihood (``-inf`` where no admissible point was found)
    converged : (B,) bool
    n_iter : int, iterations of the batch (the slowest model)
    iterations : (B,) iterations per model
    decrement : (B,) final scoring decrement ``g^T I^-1 g``
    """

    theta: np.ndarray
    loglik: np.ndarray
    converged: np.ndarray
    n_iter: int
    iterations: np.ndarray
    decrement: np.ndarray


#: smallest batch solved by triangular sweeps across the batch rather than per matrix
SWEEP_MIN_BATCH = 64


def _solve(I, g):
    """Batched solve of I d = g (Cholesky, then two triangular sweeps across the
    batch), with a ridge / pseudo-inverse fallback for singular models."""
    B, k = g.shape
    scale = np.maximum(np.abs(np.diagonal(I, axis1=-2, axis2=-1)).mean(axis=-1), 1e-300)
    A = I + (1e-12 * scale)[:, None, None] * np.eye(k)
    try:
        L = np.linalg.cholesky(A)
    except np.linalg.LinAlgError:
        _, Iinv, ok = _chol_logdet_inv(A)
        d = np.einsum("bij,bj->bi", Iinv, g)
        bad = ~ok
        d[bad] = np.einsum("bij,bj->bi", np.linalg.pinv(I[bad], hermitian=True), g[bad])
        return d
    if B < SWEEP_MIN_BATCH:  # few models: LAPACK per matrix costs less than the sweeps
        return np.linalg.solve(A, g[..., None])[..., 0]
    diag = np.diagonal(L, axis1=-2, axis2=-1)
    y = np.empty((B, k))
    for i in range(k):  # L y = g
        y[:, i] = (g[:, i] - np.einsum("bj,bj->b", L[:, i, :i], y[:, :i])) / diag[:, i]
    d = np.empty((B, k))
    for i in range(k - 1, -1, -1):  # L^T d = y
        d[:, i] = (y[:, i] - np.einsum("bj,bj->b", L[:, i + 1:, i], d[:, i + 1:])) / diag[:, i]
    return d


def fit_batch(spec, stats, start=None, max_iter=200, tol=1e-9, base=None, max_halvings=30):
    """Fit ``spec`` to each of the ``B`` samples in ``stats`` by batched Fisher scoring.

    Parameters
    ----------
    spec : ModelSpec
    stats : SuffStats with B samples
    start : array (k,) or (B, k), optional; default :func:`start_values`
        (warm-start children at their parent's estimate for speed)
    max_iter : int
    tol : float, convergence threshold on the scoring decrement
    base : dict, optional, per-sample fixed matrices (see ``Compiled.matrices``)

    Returns
    -------
    BatchFit
    """
    cm = spec.compile()
    B, k = stats.B, cm.k
    if start is None:
        theta = start_values(spec, stats)
    else:
        theta = np.array(np.broadcast_to(np.asarray(start, dtype=float), (B, k)))
    ll, g, I = evaluate(cm, theta, stats, base=base)
    bad = ~np.isfinite(ll)
    if bad.any() and start is not None:  # a warm start that does not fit: fall back to defaults
        fresh = start_values(spec, stats.take(np.nonzero(bad)[0]))
        theta[bad] = fresh
        ll_b, g_b, I_b = evaluate(cm, theta[bad], stats.take(np.nonzero(bad)[0]), base=_take_base(base, bad))
        ll[bad], g[bad], I[bad] = ll_b, g_b, I_b
    converged = np.zeros(B, dtype=bool)
    iters = np.zeros(B, dtype=int)
    dec = np.full(B, np.inf)
    active = np.isfinite(ll)
    it = 0
    for it in range(1, max_iter + 1):
        ia = np.nonzero(active)[0]
        if len(ia) == 0:
            it -= 1
            break
        sub = stats if len(ia) == B else stats.take(ia)
        bsub = base if len(ia) == B else _take_base(base, active)
        d = _solve(I[ia], g[ia])
        dec_a = np.einsum("bi,bi->b", g[ia], d)
        dec[ia] = dec_a
        done = (dec_a < tol) & np.isfinite(dec_a)
        converged[ia[done]] = True
        iters[ia] = it - 1 + 0
        step = np.ones(len(ia))
        step[done] = 0.0
        th0, ll0 = theta[ia], ll[ia]
        todo = ~done
        new_th, new_ll = th0.copy(), ll0.copy()
        fresh = np.zeros(len(ia), dtype=bool)  # accepted at the full step: gradient known
        new_g, new_I = g[ia], I[ia]
        for h in range(max_halvings):
            if not todo.any():
                break
            cand = th0 + step[:, None] * d
            st_t, b_t = _sub(sub, todo), _take_base(bsub, todo)
            if h == 0:  # the full step is usually taken: evaluate everything there at once
                l_c, g_c, I_c = evaluate(cm, cand[todo], st_t, base=b_t)
            else:
                l_c = evaluate(cm, cand[todo], st_t, grad=False, info=False, base=b_t)
            acc = np.isfinite(l_c) & (l_c >= ll0[todo] + 1e-4 * step[todo] * np.maximum(dec_a[todo], 0)
                                      - 1e-12 * np.abs(ll0[todo]))
            w = np.nonzero(todo)[0]
            new_th[w[acc]] = cand[todo][acc]
            new_ll[w[acc]] = l_c[acc]
            if h == 0:
                fresh[w[acc]] = True
                new_g[w[acc]], new_I[w[acc]] = g_c[acc], I_c[acc]
            todo[w[acc]] = False
            step[todo] *= 0.5
        stuck = todo  # no step of any length improved: at the optimum to machine precision, or stuck
        converged[ia[stuck & (dec_a < 1e3 * tol + 1e-7 * np.abs(ll0))]] = True
        moved = ~done & ~stuck
        theta[ia] = new_th
        ll[ia] = new_ll
        g[ia[fresh]], I[ia[fresh]] = new_g[fresh], new_I[fresh]
        iters[ia[moved]] = it
        active[ia[done | stuck]] = False
        late = moved & ~fresh
        if late.any():
            im = ia[late]
            l2, g2, I2 = evaluate(cm, theta[im], stats.take(im), base=_take_base(base, _mask(B, im)))
            ll[im], g[im], I[im] = l2, g2, I2
    return BatchFit(theta=theta, loglik=ll, converged=converged, n_iter=it, iterations=iters, decrement=dec)


def _mask(B, idx):
    m = np.zeros(B, dtype=bool)
    m[idx] = True
    return m


def _sub(stats, rows):
    return stats.take(np.nonzero(rows)[0]) if not rows.all() else stats


def _take_base(base, rows):
    if base is None:
        return None
    rows = np.asarray(rows)
    out = {}
    for key, val in base.items():
        val = np.asarray(val)
        out[key] = val if val.shape[0] == 1 else val[rows]
    return out


# ---------------------------------------------------------------------- starting values
def start_values(spec, stats=None, base=None):
    """Default starting values, one row per sample of ``stats`` (B, k).

    Free loadings start from marker-indicator ratios (for a factor with a fixed
    non-zero loading) or at 1; regressions at 0; then the variance, covariance,
    intercept and mean parameters solve the unweighted least-squares fit of the
    pairwise-available sample moments given those loadings (a linear problem).
    Variances are then kept positive and the latent covariance matrix positive
    definite. A user ``start=`` always wins.
    """
    cm = spec.compile()
    k, p, m = cm.k, cm.p, cm.m
    if stats is None:
        mean = np.zeros((1, p))
        cov = np.eye(p)[None]
    else:
        mean, cov, _ = stats.pairwise_moments()
    B = mean.shape[0]
    var = np.maximum(np.diagonal(cov, axis1=-2, axis2=-1), 1e-8)
    theta = np.zeros((B, k))
    have = np.zeros(k, dtype=bool)
    # loadings
    markers = {}
    for e in cm.entries:
        if e.matrix == LAMBDA and e.param < 0 and e.value not in (None, 0.0) and e.col not in markers:
            markers[e.col] = (e.row, e.value)
    lam_rows: dict[int, list[int]] = {}
    for e in cm.entries:
        if e.matrix == LAMBDA:
            lam_rows.setdefault(e.col, []).append(e.row)
    for e in cm.entries:
        if e.param < 0 or have[e.param]:
            continue
        if e.matrix == LAMBDA:
            f, x = e.col, e.row
            if f in markers:
                mk, v = markers[f]
                others = [r for r in lam_rows[f] if r not in (mk,)]
                psi = _factor_var(cov, mk, others, v)
                theta[:, e.param] = cov[:, x, mk] / (v * psi)
            else:
                theta[:, e.param] = np.sqrt(0.5 * var[:, x])
            have[e.param] = True
        elif e.matrix == BETA:
            theta[:, e.param] = 0.0
            have[e.param] = True
    # linear part (Psi, Theta, nu, alpha) by least squares given the loadings
    lin = np.array([any(e.param == a and e.matrix in (PSI, THETA) for e in cm.entries) for a in range(k)])
    lmu = np.array([any(e.param == a and e.matrix in (NU, ALPHA) for e in cm.entries) for a in range(k)])
    lin &= ~have
    lmu &= ~have
    th0 = theta.copy()
    th0[:, lin] = 0.0
    th0[:, lmu] = 0.0
    mu0, sig0, dmu, dsig = cm.jacobian(th0, base if base is None else base)
    if lin.any():
        D = dsig[:, lin].reshape(B, lin.sum(), p * p)  # derivative = design (linear in these)
        tri = np.triu_indices(p)
        Dt = dsig[:, lin][:, :, tri[0], tri[1]]
        target = (cov - sig0)[:, tri[0], tri[1]]
        sol = np.einsum("bij,bj->bi", np.linalg.pinv(np.swapaxes(Dt, -1, -2)), target)
        theta[:, lin] = sol
        del D
    if lmu.any():
        Dm = dmu[:, lmu]
        sol = np.einsum("bij,bj->bi", np.linalg.pinv(np.swapaxes(Dm, -1, -2)), mean - mu0)
        theta[:, lmu] = sol
    # keep variances positive, latent covariance PD
    for e in cm.entries:
        if e.param >= 0 and e.matrix == THETA and e.row == e.col:
            lo = 0.1 * var[:, e.row]
            theta[:, e.param] = np.where(theta[:, e.param] < lo, 0.5 * var[:, e.row], theta[:, e.param])
    theta = _repair_psi(cm, theta, var)
    for a, s in enumerate(cm.user_start):
        if s is not None:
            theta[:, a] = s
    return theta


def _factor_var(cov, mk, others, v):
    """Variance of a factor from its marker: cov(m,x) cov(m,y) / cov(x,y) averaged (B,)."""
    est = []
    for i, x in enumerate(others):
        for y in others[i + 1:]:
            with np.errstate(divide="ignore", invalid="ignore"):
                est.append(cov[:, mk, x] * cov[:, mk, y] / cov[:, x, y])
    if est:
        e = np.nanmedian(np.array(est), axis=0)
    else:
        e = np.full(cov.shape[0], np.nan)
    fallback = 0.5 * cov[:, mk, mk]
    ok = np.isfinite(e) & (e > 0.05 * cov[:, mk, mk]) & (e < cov[:, mk, mk])
    return np.where(ok, e, fallback) / v ** 2


def _repair_psi(cm, theta, var):
    """Shrink latent covariances so that Psi starts positive definite."""
    ent = [(e.row, e.col, e.param) for e in cm.entries if e.matrix == PSI and e.param >= 0]
    if not ent:
        return theta
    mats = cm.matrices(theta)
    Psi = mats[PSI]
    d = np.diagonal(Psi, axis1=-2, axis2=-1).copy()
    for r, c, a in ent:
        if r == c:
            bad = theta[:, a] <= 0
            theta[bad, a] = np.maximum(0.1 * np.abs(theta[bad, a]), 0.05 * np.median(var))
    mats = cm.matrices(theta)
    Psi = mats[PSI]
    d = np.sqrt(np.maximum(np.diagonal(Psi, axis1=-2, axis2=-1), 1e-12))
    R = Psi / (d[:, :, None] * d[:, None, :])
    ev = np.linalg.eigvalsh(R)
    for b in np.nonzero(ev[:, 0] < 0.05)[0]:
        shrink = 0.5
        for _ in range(20):
            Rb = R[b] * shrink + np.eye(len(R[b])) * (1 - shrink)
            if np.linalg.eigvalsh(Rb)[0] >= 0.05:
                break
            shrink *= 0.7
        for r, c, a in ent:
            if r != c:
                theta[b, a] = Rb[r, c] * d[b, r] * d[b, c]
    return theta
