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


#: largest matrix size factorised by the element-wise loops of :func:`_spd_small`
SMALL_P = 12


def _chol_logdet_inv(S):
    """Batched (logdet, inverse, ok) of symmetric matrices (B, q, q); ok False = not PD.

    Matrices that are not positive definite are replaced by the identity (so
    every output stays finite) and flagged in ``ok``.
    """
    if S.shape[-1] <= SMALL_P:
        return _spd_small(S)
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


def _spd_small(S):
    """:func:`_chol_logdet_inv` for many small matrices: Cholesky, triangular
    inverse and ``L^-T L^-1`` written as loops over the entries, each step one
    vector operation across the whole batch (LAPACK pays a call per matrix,
    which dominates for thousands of 5 x 5 matrices)."""
    N, q = S.shape[0], S.shape[-1]
    A = np.ascontiguousarray(np.moveaxis(S, 0, -1))  # (q, q, N): entry-major, batch contiguous per entry
    tiny = 1e-12 * np.maximum(1.0, np.maximum.reduce([np.abs(A[j, j]) for j in range(q)]))
    L = np.zeros((q, q, N))
    ok = np.ones(N, dtype=bool)
    for j in range(q):
        acc = A[j, j].copy()
        for k in range(j):
            acc -= L[j, k] * L[j, k]
        good = acc > tiny
        ok &= good
        L[j, j] = np.sqrt(np.where(good, acc, 1.0))
        for i in range(j + 1, q):
            a = A[i, j].copy()
            for k in range(j):
                a -= L[i, k] * L[j, k]
            L[i, j] = a / L[j, j]
    if not ok.all():  # start the failed ones again from the identity
        bad = ~ok
        L[:, :, bad] = np.eye(q)[:, :, None]
    dinv = 1.0 / np.array([L[i, i] for i in range(q)])
    logdet = -2.0 * np.log(dinv).sum(axis=0)
    X = np.zeros((q, q, N))  # X = L^-1 (lower)
    for i in range(q):
        X[i, i] = dinv[i]
        for k in range(i):
            acc = L[i, k] * X[k, k]
            for j in range(k + 1, i):
                acc += L[i, j] * X[j, k]
            X[i, k] = -acc * dinv[i]
    W = np.empty((q, q, N))
    for i in range(q):
        for j in range(i + 1):
            acc = X[i, i] * X[i, j]
            for k in range(i + 1, q):
                acc += X[k, i] * X[k, j]
            W[i, j] = acc
            W[j, i] = acc
    return logdet, np.ascontiguousarray(np.moveaxis(W, -1, 0)), ok


def masked_moments(sigma, masks):
    """Each pattern's covariance with its unobserved block replaced by the identity.

    ``sigma`` (B, p, p), ``masks`` (P, p) -> (B, P, p, p) and the 0/1 outer
    products of the masks (P, p, p). The inverse of the result, times that
    outer product, is ``Sigma_oo^-1`` embedded in a p x p matrix of zeros, and
    its log-determinant is that of ``Sigma_oo``: so every pattern becomes the
    same p x p operation and all patterns of all models go through one batched
    factorisation instead of a loop over patterns.
    """
    M = masks.astype(float)
    MM = M[:, :, None] * M[:, None, :]
    D = np.eye(masks.shape[1])[None] * (1.0 - M)[:, :, None]
    return sigma[:, None] * MM[None] + D[None], MM


#: elements per stacked (models x patterns x ...) array before patterns are taken in blocks
BLOCK_ELEMENTS = 3_000_000


def evaluate(cm, theta, stats, grad=True, info=True, base=None):
    """Log-likelihood (B,), gradient (B, k) and expected information (B, k, k).

    Models whose implied covariance is not positive definite for some pattern
    get a log-likelihood of ``-inf`` (gradient and information are then
    meaningless for them).

    All patterns are handled at once through :func:`masked_moments` (in blocks
    of patterns when models x patterns is large). The covariance derivatives
    are used in low-rank form (each free entry adds ``w (u v^T + v u^T)``): the
    gradient is ``2 w u^T G v`` per entry, and the information is accumulated
    either over the saturated moments (small ``p``: ``B p^4`` per pattern) or
    over entry pairs (``B E^2 p`` per pattern).
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
        E = 0
    p = sigma.shape[-1]
    nB = stats.n
    if nB.shape[0] not in (1, B):
        raise ValueError(f"statistics hold {nB.shape[0]} samples but {B} parameter vectors were given")
    via_moments = info and p <= MOMENT_PATH_MAX_P
    ll = np.zeros(B)
    ok_all = np.ones(B, dtype=bool)
    if grad:
        G = np.zeros(sigma.shape)
        g = np.zeros(mu.shape)
    if info and via_moments:
        H = np.zeros((B, p, p, p, p))
        Hm = np.zeros((B, p, p))
    elif info:
        Ie = np.zeros((B, E, E))
        Im = np.zeros((B, k, k))
    live = np.nonzero((nB > 0).any(axis=0))[0]
    width = p * p if (via_moments or not info) else max(p * p, E * p, E * E)
    per = max(1, int(BLOCK_ELEMENTS // max(1, B * width)))
    for lo in range(0, len(live), per):
        js = live[lo:lo + per]
        if len(js) and js[-1] - js[0] == len(js) - 1:
            js = slice(int(js[0]), int(js[-1]) + 1)  # a view, not a copy, of the statistics
        Sg, MM = masked_moments(sigma, stats.masks[js])
        Pb = MM.shape[0]
        logdet, W, ok = _chol_logdet_inv(Sg.reshape(B * Pb, p, p))
        logdet, ok = logdet.reshape(B, Pb), ok.reshape(B, Pb)
        W = W.reshape(B, Pb, p, p) * MM[None]
        n = nB[:, js]
        q = stats.masks[js].sum(axis=1)
        ok_all &= (ok | (n == 0)).all(axis=1)
        s = stats.sums[:, js]
        C = stats.cross[:, js]
        # with a = W s and b = W mu, tr(W S) = tr(W C) - 2 s^T b + n mu^T b and
        # W S W = W C W - a b^T - b a^T + n b b^T: S itself is never formed
        a = (W @ s[..., None])[..., 0]
        b = (W @ mu[:, None, :, None])[..., 0]
        trWS = (W * C).reshape(B, Pb, p * p).sum(axis=-1) - 2.0 * (s * b).sum(axis=-1) + n * (b * mu[:, None]).sum(axis=-1)
        ll += -0.5 * (n * (q * LOG2PI) + n * logdet + trWS).sum(axis=1)
        if not grad and not info:
            continue
        nW = n[..., None, None] * W
        nWsum = nW.sum(axis=1)
        if grad:
            g += a.sum(axis=1) - (nWsum @ mu[..., None])[..., 0]
            ab = np.swapaxes(a, 1, 2) @ b
            G += 0.5 * ((W @ C @ W).sum(axis=1) - ab - np.swapaxes(ab, 1, 2)
                        + np.swapaxes(n[..., None] * b, 1, 2) @ b - nWsum)
        if info and via_moments:
            Hm += nWsum
            Wr = W.reshape(B, Pb, p * p)
            H += (0.5 * np.swapaxes(nW.reshape(B, Pb, p * p), 1, 2) @ Wr).reshape(B, p, p, p, p)
        elif info:
            WU = U[:, None] @ W
            WV = V[:, None] @ W
            Ut, Vt = np.swapaxes(U, -1, -2)[:, None], np.swapaxes(V, -1, -2)[:, None]
            Xuv = WU @ Vt
            nn = n[..., None, None]
            Ie += (nn * (Xuv * np.swapaxes(Xuv, -1, -2) + (WU @ Ut) * (WV @ Vt))).sum(axis=1)
            Im += np.einsum("bj,bki,bjil,bml->bkm", n, dmu, W, dmu, optimize=True)
    ll = np.where(ok_all, ll, -np.inf)
    out = [ll]
    if grad:
        ge = 2.0 * w * np.einsum("bei,bij,bej->be", U, G, V)
        out.append(ge @ Cinc + np.einsum("bi,bki->bk", g, dmu))
    if info and via_moments:
        # H[a, c, d, e] summed n W_ac W_de / 2; the information needs the (a d), (c e) pairing
        H = np.transpose(H, (0, 1, 3, 2, 4)).reshape(B, p * p, p * p)
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
