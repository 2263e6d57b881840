"""Normal (FIML) log-likelihood, its gradient and Fisher information, batched over models.

For a missingness pattern with observed index set ``o``, count ``n``, sum ``s``
and raw cross-product sum ``C``, and implied moments ``mu_o``, ``Sigma_o``
(``W = Sigma_o^-1``, ``S = C - s mu^T - mu s^T + n mu mu^T``):

.. math::
   \\ell = -\\tfrac12 [n q \\log 2\\pi + n \\log|\\Sigma_o| + \\operatorname{tr}(W S)]

   \\partial\\ell/\\partial\\mu_o = W (s - n\\mu_o), \\qquad
   \\partial\\ell/\\partial\\Sigma_o = \\tfrac12 (W S W - n W)

and the expected (Fisher) information of parameters ``a``, ``b``

.. math:: n [\\tfrac12 \\operatorname{tr}(W \\dot\\Sigma_a W \\dot\\Sigma_b) + \\dot\\mu_a^T W \\dot\\mu_b].

The likelihood of the whole sample is the sum over patterns (full-information
maximum likelihood; Arbuckle 1996, in *Advanced Structural Equation Modeling*,
Erlbaum). Loops run over patterns, never over models.
"""

from __future__ import annotations

import numpy as np

from wavetrail.sem.spec import ALPHA, LAMBDA, PSI

LOG2PI = np.log(2.0 * np.pi)

#: largest p for which the information is accumulated over the saturated moments
MOMENT_PATH_MAX_P = 12


def _chol_logdet_inv(S):
    """Batched (logdet, inverse, ok) of symmetric matrices (B, q, q); ok False = not PD."""
    B, q = S.shape[0], S.shape[-1]
    try:
        L = np.linalg.cholesky(S)
        ok = np.ones(B, dtype=bool)
    except np.linalg.LinAlgError:
        ev = np.linalg.eigvalsh(S)
        ok = ev[:, 0] > 1e-12 * np.maximum(1.0, np.abs(ev[:, -1]))
        S = np.where(ok[:, None, None], S, np.eye(q))
        try:
            L = np.linalg.cholesky(S)
        except np.linalg.LinAlgError:  # pragma: no cover - numerically borderline
            ev2 = np.linalg.eigvalsh(S)
            ok &= ev2[:, 0] > 0
            S = np.where(ok[:, None, None], S, np.eye(q))
            L = np.linalg.cholesky(S)
    logdet = 2.0 * np.log(np.diagonal(L, axis1=-2, axis2=-1)).sum(axis=-1)
    Linv = np.linalg.inv(L)
    W = np.swapaxes(Linv, -1, -2) @ Linv
    return logdet, W, ok


def evaluate(cm, theta, stats, grad=True, info=True, base=None):
    """Log-likelihood (B,), gradient (B, k) and expected information (B, k, k).

    Models whose implied covariance is not positive definite for some pattern
    get a log-likelihood of ``-inf`` (gradient and information are then
    meaningless for them).

    The covariance derivatives are used in low-rank form (each free entry adds
    ``w (u v^T + v u^T)``): the gradient is ``2 w u^T G v`` per entry, and the
    information is accumulated either over the saturated moments (small ``p``:
    ``B p^4`` per pattern) or over entry pairs (``B E^2 q`` per pattern).
    """
    theta = np.atleast_2d(np.asarray(theta, dtype=float))
    B = theta.shape[0]
    k = cm.k
    if grad or info:
        mu, sigma, U, V, w, prm, dmu = cm.entry_terms(theta, base)
        E = len(w)
        Cinc = np.zeros((E, k))
        Cinc[np.arange(E), prm] = 1.0
    else:
        mu, sigma = cm.implied(theta, base)
    p = sigma.shape[-1]
    ll = np.zeros(B)
    ok_all = np.ones(B, dtype=bool)
    G = np.zeros(sigma.shape) if grad else None
    g = np.zeros(mu.shape) if grad else None
    via_moments = info and p <= MOMENT_PATH_MAX_P
    if info and via_moments:
        H = np.zeros((B, p * p, p * p))
        Hm = np.zeros((B, p, p))
    elif info:
        Ie = np.zeros((B, E, E))
        Im = np.zeros((B, k, k))
    nB = stats.n
    if nB.shape[0] not in (1, B):
        raise ValueError(f"statistics hold {nB.shape[0]} samples but {B} parameter vectors were given")
    for j, mask in enumerate(stats.masks):
        n = nB[:, j]
        if not np.any(n > 0):
            continue
        o = np.nonzero(mask)[0]
        q = len(o)
        Sg = sigma[:, o][:, :, o]
        m = mu[:, o]
        s = stats.sums[:, j][:, o]
        C = stats.cross[:, j][:, o][:, :, o]
        logdet, W, ok = _chol_logdet_inv(Sg)
        ok_all &= ok | (n == 0)
        sm = s[:, :, None] * m[:, None, :]
        S = C - sm - np.swapaxes(sm, -1, -2) + n[:, None, None] * m[:, :, None] * m[:, None, :]
        WS = W @ S
        ll += -0.5 * (n * q * LOG2PI + n * logdet + np.trace(WS, axis1=-2, axis2=-1))
        if grad:
            gm = np.einsum("bij,bj->bi", W, s - n[:, None] * m)
            Gs = 0.5 * (WS @ W - n[:, None, None] * W)
            g[:, o] += gm
            G[:, o[:, None], o[None, :]] += Gs
        if info and via_moments:
            Wf = np.zeros((B, p, p))
            Wf[:, o[:, None], o[None, :]] = W
            Hm += n[:, None, None] * Wf
            Wn = (0.5 * n)[:, None, None] * Wf
            H += (Wn[:, :, None, :, None] * Wf[:, None, :, None, :]).reshape(B, p * p, p * p)
        elif info:
            Uo, Vo = U[:, :, o], V[:, :, o]
            WU = Uo @ W
            WV = Vo @ W
            Xuv = WU @ np.swapaxes(Vo, -1, -2)
            Ie += n[:, None, None] * (Xuv * np.swapaxes(Xuv, -1, -2)
                                      + (WU @ np.swapaxes(Uo, -1, -2)) * (WV @ np.swapaxes(Vo, -1, -2)))
            Dm = dmu[:, :, o]
            Im += n[:, None, None] * (Dm @ W @ np.swapaxes(Dm, -1, -2))
    ll = np.where(ok_all, ll, -np.inf)
    out = [ll]
    if grad:
        ge = 2.0 * w * np.einsum("bei,bij,bej->be", U, G, V)
        out.append(ge @ Cinc + np.einsum("bi,bki->bk", g, dmu))
    if info and via_moments:
        R = np.einsum("ek,bei,bej->bkij", Cinc * w[:, None], U, V, optimize=True)
        dsig = R + np.swapaxes(R, -1, -2)
        Df = dsig.reshape(B, k, p * p)
        I = Df @ H @ np.swapaxes(Df, -1, -2) + dmu @ Hm @ np.swapaxes(dmu, -1, -2)
    elif info:
        I = Cinc.T @ (Ie * np.outer(w, w)) @ Cinc + Im
    if info:
        out.append(0.5 * (I + np.swapaxes(I, -1, -2)))
    return tuple(out) if len(out) > 1 else ll


def casewise(cm, theta, Y, scores=True, base=None):
    """Per-person log-likelihood (n,) and scores (n, k) at one ``theta`` (k,).

    Each person contributes through the observed entries only (FIML); rows
    with nothing observed contribute zero.
    """
    from wavetrail.sem.stats import pattern_index

    Y = np.asarray(Y, dtype=float)
    theta = np.atleast_2d(np.asarray(theta, dtype=float))
    mu, sigma, dmu, dsig = cm.jacobian(theta, base)
    mu, sigma, dmu, dsig = mu[0], sigma[0], dmu[0], dsig[0]
    masks, idx = pattern_index(Y)
    n, k = Y.shape[0], cm.k
    ll = np.zeros(n)
    sc = np.zeros((n, k))
    for j, mask in enumerate(masks):
        rows = np.nonzero(idx == j)[0]
        o = np.nonzero(mask)[0]
        q = len(o)
        logdet, W, ok = _chol_logdet_inv(sigma[o][:, o][None])
        W = W[0]
        if not ok[0]:
            ll[rows] = -np.inf
            sc[rows] = np.nan
            continue
        r = Y[np.ix_(rows, o)] - mu[o]
        gm = r @ W  # (n_j, q)
        ll[rows] = -0.5 * (q * LOG2PI + logdet[0] + np.einsum("ni,ni->n", gm, r))
        if scores:
            Ds = dsig[:, o][:, :, o]  # (k, q, q)
            # 0.5 * tr((W r r^T W - W) D) = 0.5 * (gm^T D gm) - 0.5 tr(W D)
            quad = np.einsum("ni,kij,nj->nk", gm, Ds, gm)
            trWD = np.einsum("ij,kji->k", W, Ds)
            sc[rows] = 0.5 * (quad - trWD) + gm @ dmu[:, o].T
    return ll, sc


def observed_info(cm, theta, stats, base=None):
    """Analytic observed information (negative Hessian) of one model, (k, k).

    Moment part per pattern (``S_a = dSigma/dtheta_a``, ``m_a = dmu/dtheta_a``,
    ``K = W S W``, ``z = W (s - n mu)``):

    .. math:: \\operatorname{tr}(W S_a K S_b) - \\tfrac n2 \\operatorname{tr}(W S_a W S_b)
              + m_a^T W S_b z + m_b^T W S_a z + n m_a^T W m_b

    minus the curvature of the model, ``tr(G d2Sigma_ab) + g^T d2mu_ab`` with the
    summed gradient matrices ``G`` and ``g`` (loading x loading, loading x latent
    covariance and loading x latent mean pairs). Models with latent regressions
    are not covered (returns None; use numerical differences).
    """
    if cm.has_beta:
        return None
    theta = np.atleast_2d(np.asarray(theta, dtype=float))[:1]
    k = cm.k
    mu, sigma, U, V, w, prm, dmu = cm.entry_terms(theta, base)
    mu, sigma, U, V, dmu = mu[0], sigma[0], U[0], V[0], dmu[0]
    E = len(w)
    Cw = np.zeros((E, k))
    Cw[np.arange(E), prm] = w
    p = cm.p
    Te = np.zeros((E, E))
    X = np.zeros((k, E))
    Im = np.zeros((k, k))
    G = np.zeros((p, p))
    g = np.zeros(p)
    for j, mask in enumerate(stats.masks):
        n = stats.n[0, j]
        if n <= 0:
            continue
        o = np.nonzero(mask)[0]
        Sg = sigma[np.ix_(o, o)]
        m = mu[o]
        s = stats.sums[0, j][o]
        C = stats.cross[0, j][np.ix_(o, o)]
        W = np.linalg.inv(Sg)
        S = C - np.outer(s, m) - np.outer(m, s) + n * np.outer(m, m)
        K = W @ S @ W
        z = W @ (s - n * m)
        g[o] += z
        G[np.ix_(o, o)] += 0.5 * (K - n * W)
        Uo, Vo, Dm = U[:, o], V[:, o], dmu[:, o]
        KU, KV, WU, WV = Uo @ K, Vo @ K, Uo @ W, Vo @ W
        Kuu, Kuv, Kvv = KU @ Uo.T, KU @ Vo.T, KV @ Vo.T
        Wuu, Wuv, Wvv = WU @ Uo.T, WU @ Vo.T, WV @ Vo.T
        Te += (Kuv.T * Wuv + Kvv * Wuu + Kuu * Wvv + Kuv * Wuv.T) - n * (Wuv * Wuv.T + Wuu * Wvv)
        DmW = Dm @ W
        X += (DmW @ Uo.T) * (Vo @ z)[None, :] + (DmW @ Vo.T) * (Uo @ z)[None, :]
        Im += n * (DmW @ Dm.T)
    Xk = X @ Cw
    I = Cw.T @ Te @ Cw + Xk + Xk.T + Im
    # curvature of the model: second derivatives of Sigma and mu
    mats = cm.matrices(theta, base)
    Psi, al = mats[PSI][0], mats[ALPHA][0]
    Lam = mats[LAMBDA][0]
    GL = G @ Lam
    H2 = np.zeros((k, k))
    lam = list(zip(*cm.free_idx[LAMBDA]))
    for i, f, a in lam:
        for j2, f2, b in lam:
            H2[a, b] += 2.0 * G[i, j2] * Psi[f, f2]
        for gg, hh, b in zip(*cm.free_idx[PSI]):
            v = 0.0
            if f == hh:
                v += 2.0 * GL[i, gg]
            if f == gg and gg != hh:
                v += 2.0 * GL[i, hh]
            H2[a, b] += v
            H2[b, a] += v
        for gg, _, b in zip(*cm.free_idx[ALPHA]):
            if gg == f:
                H2[a, b] += g[i]
                H2[b, a] += g[i]
    I = I - H2
    return 0.5 * (I + I.T)
