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

import functools

import numpy as np

from wavetrail.sem.spec import ALPHA, LAMBDA, PSI

LOG2PI = np.log(2.0 * np.pi)

#: largest p for which the information is accumulated over the saturated moments
MOMENT_PATH_MAX_P = 12

#: from this many (model, pattern) cells on, the information is accumulated over the saturated
#: moments at any p: per pattern p^4 / 4 products instead of the E^2 p of the entry pairs, plus one
#: mapping to the parameters (k p^4) per evaluation, which many patterns repay (large panels with
#: many items: every person a pattern of item non-response)
MOMENT_PATH_MIN_CELLS = 512


#: largest matrix size factorised by the element-wise loops of :func:`_spd_small`
SMALL_P = 12
#: the loops pay only for batches of at least ``LOOPS_PER_ENTRY * q * q`` matrices; below,
#: LAPACK is faster (measured, 2 cores: q = 4 crosses near 250 matrices, q = 6 near 400,
#: q = 12 near 2,000; e.g. 10 matrices of 6 x 6: 46 us against 536 us)
LOOPS_PER_ENTRY = 15


def _chol_logdet_inv(S):
    """Batched (logdet, inverse, ok) of symmetric matrices (B, q, q); ok False = not PD.

    Matrices that are not positive definite are replaced by the identity (so
    every output stays finite) and flagged in ``ok``.
    """
    if S.shape[-1] <= SMALL_P:
        if S.shape[0] >= LOOPS_PER_ENTRY * S.shape[-1] ** 2:
            return _spd_small(S)
        return _spd_small_lapack(S)
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


def _spd_small_lapack(S):
    """:func:`_spd_small` by LAPACK for small batches, with the same test of positive
    definiteness (every squared pivot above ``1e-12 * max(1, largest diagonal entry)``)."""
    N, q = S.shape[0], S.shape[-1]
    diag = np.diagonal(S, axis1=-2, axis2=-1)
    tiny = 1e-12 * np.maximum(1.0, np.abs(diag).max(axis=-1))
    finite = np.isfinite(S).all(axis=(-2, -1))
    S = np.where(finite[:, None, None], S, np.eye(q))
    try:
        L = np.linalg.cholesky(S)
        ok = finite & (np.diagonal(L, axis1=-2, axis2=-1) ** 2 > tiny[:, None]).all(axis=-1)
    except np.linalg.LinAlgError:
        L = np.zeros_like(S)
        ok = finite.copy()
        for b in range(N):  # rare: some matrix of the batch is not positive definite
            try:
                L[b] = np.linalg.cholesky(S[b])
            except np.linalg.LinAlgError:
                ok[b] = False
        ok &= (np.diagonal(L, axis1=-2, axis2=-1) ** 2 > tiny[:, None]).all(axis=-1)
    if not ok.all():
        L[~ok] = np.eye(q)
    logdet = 2.0 * np.log(np.diagonal(L, axis1=-2, axis2=-1)).sum(axis=-1)
    Linv = np.linalg.inv(L)
    return logdet, np.swapaxes(Linv, -1, -2) @ Linv, ok


def _spd_small(S):
    """:func:`_chol_logdet_inv` for many small matrices: Cholesky, triangular
    inverse and ``L^-T L^-1`` written as loops over the entries, each step one
    vector operation across the whole batch (LAPACK pays a call per matrix,
    which dominates for thousands of 5 x 5 matrices). Matrices far from positive
    definite (trial points of a search) may overflow on the way; they are flagged."""
    with np.errstate(over="ignore", invalid="ignore"):
        return _spd_small_loops(S)


def _spd_small_loops(S):
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

#: smallest number of (model, pattern) cells evaluated pattern-size by pattern-size
COMPACT_MIN_CELLS = 2048

#: (model, pattern) cells evaluated together; larger batches go in slices of models
#: (measured on 4,000 quadratic growth models: about 15% faster than one pass)
MODEL_CHUNK_CELLS = 16384


def _slice_base(base, lo, hi, B):
    if base is None:
        return None
    return {key: (val if np.shape(val)[0] != B else val[lo:hi]) for key, val in base.items()}


def pattern_blocks(masks, live, limit):
    """Live patterns in chunks of at most ``limit``, each chunk grouped by size.

    Returns a list of chunks; a chunk is a list of ``(pos, js, o)`` groups:
    the positions of the group's patterns within the chunk, their indices
    (P_g,) and the observed columns of each (P_g, q), all patterns of a group
    observing the same number ``q`` of variables.
    """
    live = np.asarray(live)
    chunks = []
    for lo in range(0, len(live), max(1, limit)):
        part = live[lo:lo + limit]
        q = masks[part].sum(axis=1)
        groups = []
        for size in np.unique(q):
            pos = np.nonzero(q == size)[0]
            js = part[pos]
            o = np.nonzero(masks[js])[1].reshape(len(js), int(size))
            groups.append((pos, js, o))
        chunks.append((part, groups))
    return chunks


@functools.lru_cache(maxsize=64)
def _vech_index(p):
    """Position of entry (i, j) in the upper-triangle (vech) ordering, (p, p) ints."""
    r, c = np.triu_indices(p)
    pos = np.zeros((p, p), dtype=int)
    pos[r, c] = np.arange(len(r))
    pos[c, r] = np.arange(len(r))
    pos.setflags(write=False)
    return pos


@functools.lru_cache(maxsize=64)
def _triu_flat(p):
    """Flat (row-major) positions of the upper triangle of a p x p matrix, in vech order."""
    r, c = np.triu_indices(p)
    flat = r * p + c
    flat.setflags(write=False)
    return flat


def evaluate(cm, theta, stats, grad=True, info=True, base=None):
    """Log-likelihood (B,), gradient (B, k) and expected information (B, k, k).

    Models whose implied covariance is not positive definite for some pattern
    get a log-likelihood of ``-inf`` (gradient and information are then
    meaningless for them).

    Two ways through the patterns give the same numbers:

    * few (model, pattern) cells: every pattern at full size at once
      (:func:`masked_moments`), the fewest array operations;
    * many cells (forest batches): patterns grouped by how many variables they
      observe, each pattern's observed moments gathered into dense ``q x q``
      arrays (:func:`pattern_blocks`), so the factorisation, ``tr(W S)`` and
      ``W S W`` cost ``q^3`` rather than ``p^3`` per cell.

    Both accumulate, over patterns, ``g = sum W (s - n mu)``, the symmetric
    ``G = sum (W S W - n W) / 2`` and, for the information, ``sum n W`` and
    ``sum n vech(W) vech(W)^T / 2`` in upper-triangle (vech) form. These
    are mapped to the parameters by the covariance derivatives, used in
    low-rank form (each free entry adds ``w (u v^T + v u^T)``) or, when they do
    not depend on the parameters (growth models with fixed time scores), by
    constant matrices computed once. For large ``p`` the information is
    accumulated over entry pairs instead (``B E^2 p`` per pattern).
    """
    theta = np.atleast_2d(np.asarray(theta, dtype=float))
    B = theta.shape[0]
    k = cm.k
    live = np.nonzero((stats.n > 0).any(axis=0))[0]
    cells = B * len(live)
    if cells > 2 * MODEL_CHUNK_CELLS and stats.B == B:
        # large batches in slices of models whose arrays stay in cache
        step = max(1, MODEL_CHUNK_CELLS * B // cells)
        parts = [evaluate(cm, theta[lo:lo + step], stats.take(slice(lo, lo + step)), grad, info,
                          _slice_base(base, lo, lo + step, B)) for lo in range(0, B, step)]
        if not (grad or info):
            return np.concatenate(parts)
        return tuple(np.concatenate([part[i] for part in parts]) for i in range(len(parts[0])))
    if grad or info:
        mu, sigma, U, V, w, prm, dmu = cm.entry_terms(theta, base)
        E = len(w)
        Cinc = np.zeros((E, k))
        Cinc[np.arange(E), prm] = 1.0
    else:
        mu, sigma = cm.implied(theta, base)
        U = V = dmu = None
        E = 0
    p = sigma.shape[-1]
    nB = stats.n
    if nB.shape[0] not in (1, B):
        raise ValueError(f"statistics hold {nB.shape[0]} samples but {B} parameter vectors were given")
    via_moments = info and (p <= MOMENT_PATH_MAX_P or cells >= MOMENT_PATH_MIN_CELLS)
    mv = p * (p + 1) // 2
    acc = {"ll": np.zeros(B), "ok": np.ones(B, dtype=bool)}
    if grad:
        acc["Gv"] = np.zeros((B, mv))
        acc["g"] = np.zeros((B, p))
    if info and via_moments:
        acc["Hv"] = np.zeros((B, mv, mv))
        acc["Hmv"] = np.zeros((B, mv))
    elif info:
        acc["Ie"] = np.zeros((B, E, E))
        acc["Im"] = np.zeros((B, k, k))
    width = p * p if (via_moments or not info) else max(p * p, E * p, E * E)
    per = max(1, int(BLOCK_ELEMENTS // max(1, B * width)))
    terms = (mu, sigma, U, V, dmu)
    if p <= MOMENT_PATH_MAX_P and cells >= COMPACT_MIN_CELLS:
        for part, groups in _blocks(stats.masks, live, per):
            _compact_chunk(acc, terms, stats, part, groups, grad, info)
    else:
        for lo in range(0, len(live), per):
            _masked_chunk(acc, terms, stats, live[lo:lo + per], grad, info)
    ll = np.where(acc["ok"], acc["ll"], -np.inf)
    out = [ll]
    if not (grad or info):
        return ll
    const = _constant_maps(cm, base, U, V, w, Cinc, dmu, want_info=via_moments)
    vpos = _vech_index(p)
    if grad:
        if const is not None:
            out.append(acc["Gv"] @ const["grad"] + acc["g"] @ const["dmu"].T)
        else:
            G = acc["Gv"][:, vpos]
            ge = 2.0 * w * np.einsum("bei,bij,bej->be", U, G, V)
            out.append(ge @ Cinc + np.einsum("bi,bki->bk", acc["g"], dmu))
    if info and via_moments:
        if const is not None and "info" in const:
            I = (acc["Hv"].reshape(B, mv * mv) @ const["info"] + acc["Hmv"] @ const["info_mean"]).reshape(B, k, k)
        else:
            vp = vpos.reshape(-1)
            # H[(a, c), (d, e)] = sum n W_ac W_de / 2; the information pairs (a d) with (c e)
            H = acc["Hv"][:, vp[:, None], vp[None, :]].reshape(B, p, p, p, p)
            H = np.transpose(H, (0, 1, 3, 2, 4)).reshape(B, p * p, p * p)
            R = np.einsum("ek,bei,bej->bkij", Cinc * w[:, None], U, V, optimize=True)
            Df = (R + np.swapaxes(R, -1, -2)).reshape(B, k, p * p)
            Hm = acc["Hmv"][:, vpos]
            I = Df @ H @ np.swapaxes(Df, -1, -2) + dmu @ Hm @ np.swapaxes(dmu, -1, -2)
    elif info:
        I = Cinc.T @ (acc["Ie"] * np.outer(w, w)) @ Cinc + acc["Im"]
    if info:
        out.append(0.5 * (I + np.swapaxes(I, -1, -2)))
    return tuple(out)


#: largest k^2 p^4 for which the information map of a constant-derivative model is precomputed
CONSTANT_INFO_MAX = 4_000_000


def _constant_maps(cm, base, U, V, w, Cinc, dmu, want_info):
    """Parameter maps of the vech accumulators, when the derivatives of the
    implied moments do not depend on the parameters (no free loadings, no
    latent regressions, no per-sample loadings); None otherwise.

    ``grad`` (m, k) and ``dmu`` (k, p) give the gradient, ``info`` (m^2, k^2)
    and ``info_mean`` (m, k^2) the information, where ``m = p (p + 1) / 2``.
    Computed once per compiled model.
    """
    if cm.has_beta or len(cm.free_idx[LAMBDA][2]) or (base is not None and LAMBDA in base):
        return None
    cached = getattr(cm, "_constant_maps", None)
    if cached is not None and (not want_info or cached["with_info"]):
        return cached
    k = cm.k
    u, v, dm = U[0], V[0], dmu[0]
    p = u.shape[-1]
    vpos = _vech_index(p)
    mv = p * (p + 1) // 2
    Q = np.zeros((p * p, mv))
    Q[np.arange(p * p), vpos.reshape(-1)] = 1.0
    uv = (2.0 * w)[:, None, None] * u[:, :, None] * v[:, None, :]  # (E, p, p)
    out = {"grad": Q.T @ uv.reshape(len(w), p * p).T @ Cinc, "dmu": dm, "with_info": want_info}
    if want_info and k * k * p ** 4 <= CONSTANT_INFO_MAX:
        R = np.einsum("ek,ei,ej->kij", Cinc * w[:, None], u, v)
        D = R + np.swapaxes(R, -1, -2)  # (k, p, p)
        # I_ab = sum H[(a', c), (d, e)] D_a[a', d] D_b[c, e], H read from its vech form
        T = np.einsum("aid,bce->icdeab", D, D).reshape(p * p, p * p, k * k)
        T = np.einsum("xyz,xi,yj->ijz", T, Q, Q, optimize=True)
        out["info"] = T.reshape(mv * mv, k * k)
        out["info_mean"] = Q.T @ np.einsum("ai,bj->ijab", dm, dm).reshape(p * p, k * k)
    cm._constant_maps = out
    return out


def _masked_chunk(acc, terms, stats, js, grad, info):
    """Accumulate one chunk of patterns at full size (masked moments)."""
    mu, sigma, U, V, dmu = terms
    B, p = mu.shape
    if len(js) and js[-1] - js[0] == len(js) - 1:
        js = slice(int(js[0]), int(js[-1]) + 1)  # a view, not a copy, of the statistics
    Sg, MM = masked_moments(sigma, stats.masks[js])
    Pb = MM.shape[0]
    logdet, W, ok = _chol_logdet_inv(Sg.reshape(B * Pb, p, p))
    logdet, ok = logdet.reshape(B, Pb), ok.reshape(B, Pb)
    W = W.reshape(B, Pb, p, p) * MM[None]
    n = stats.n[:, js]
    q = stats.masks[js].sum(axis=1)
    acc["ok"] &= (ok | (n == 0)).all(axis=1)
    s = stats.sums[:, js]
    C = stats.cross[:, js]
    # with a = W s and b = W mu, tr(W S) = tr(W C) - 2 s^T b + n mu^T b and
    # W S W = W C W - a b^T - b a^T + n b b^T: S itself is never formed
    a = (W @ s[..., None])[..., 0]
    b = (W @ mu[:, None, :, None])[..., 0]
    trWS = (W * C).reshape(B, Pb, p * p).sum(axis=-1) - 2.0 * (s * b).sum(axis=-1) + n * (b * mu[:, None]).sum(axis=-1)
    acc["ll"] += -0.5 * (n * (q * LOG2PI) + n * logdet + trWS).sum(axis=1)
    if not grad and not info:
        return
    tri = _triu_flat(p)
    nW = n[..., None, None] * W
    nWsum = nW.sum(axis=1)
    if grad:
        acc["g"] += a.sum(axis=1) - (nWsum @ mu[..., None])[..., 0]
        ab = np.swapaxes(a, 1, 2) @ b
        G = 0.5 * ((W @ C @ W).sum(axis=1) - ab - np.swapaxes(ab, 1, 2)
                   + np.swapaxes(n[..., None] * b, 1, 2) @ b - nWsum)
        acc["Gv"] += G.reshape(B, p * p)[:, tri]
    if info and "Hv" in acc:
        Wv = W.reshape(B, Pb, p * p)[..., tri]
        acc["Hmv"] += nWsum.reshape(B, p * p)[:, tri]
        acc["Hv"] += 0.5 * np.swapaxes(n[..., None] * Wv, 1, 2) @ Wv
    elif info:
        WU = U[:, None] @ W
        WV = V[:, None] @ W
        Ut, Vt = np.swapaxes(U, -1, -2)[:, None], np.swapaxes(V, -1, -2)[:, None]
        Xuv = WU @ Vt
        nn = n[..., None, None]
        acc["Ie"] += (nn * (Xuv * np.swapaxes(Xuv, -1, -2) + (WU @ Ut) * (WV @ Vt))).sum(axis=1)
        acc["Im"] += np.einsum("bj,bki,bjil,bml->bkm", n, dmu, W, dmu, optimize=True)


def _compact_chunk(acc, terms, stats, part, groups, grad, info):
    """Accumulate one chunk of patterns group by group at each pattern's own size."""
    mu, sigma = terms[0], terms[1]
    B, p = mu.shape
    P = len(part)
    mv = p * (p + 1) // 2
    sig_f = sigma.reshape(B, p * p)
    cross_f = stats.cross.reshape(stats.B, stats.P, p * p)
    n_all = stats.n[:, part]
    if info:
        Wv = np.zeros((B, P * mv))
    for pos, js, o, flat, vsrc, vdest, scat_g, scat_v in groups:
        Pg, q = o.shape
        logdet, W, ok = _chol_logdet_inv(sig_f[:, flat].reshape(B * Pg, q, q))
        logdet, ok, W = logdet.reshape(B, Pg), ok.reshape(B, Pg), W.reshape(B, Pg, q, q)
        n = n_all[:, pos]
        acc["ok"] &= (ok | (n == 0)).all(axis=1)
        nv = n[..., None]
        m = mu[:, o]
        d = stats.sums[:, js[:, None], o] - nv * m  # s - n mu
        # S = C - s mu^T - mu s^T + n mu mu^T, written with d = s - n mu
        S = cross_f[:, js[:, None], flat.reshape(Pg, q * q)].reshape(-1, Pg, q, q) \
            - d[..., :, None] * m[..., None, :] - m[..., :, None] * (d + nv * m)[..., None, :]
        trWS = (W * S).reshape(B, Pg, q * q).sum(axis=-1)
        acc["ll"] += -0.5 * (n * (q * LOG2PI) + n * logdet + trWS).sum(axis=1)
        if grad:
            acc["g"] += (W @ d[..., None]).reshape(B, Pg * q) @ scat_v
            Gc = W @ S @ W - nv[..., None] * W
            acc["Gv"] += 0.5 * (Gc.reshape(B, Pg * q * q) @ scat_g)
        if info:
            Wv[:, vdest] = W.reshape(B, Pg * q * q)[:, vsrc]
    if info:
        Wv = Wv.reshape(B, P, mv)
        acc["Hmv"] += (n_all[:, None, :] @ Wv)[:, 0]
        acc["Hv"] += 0.5 * np.swapaxes(n_all[..., None] * Wv, 1, 2) @ Wv


_BLOCK_CACHE: dict = {}


def _blocks(masks, live, per):
    """:func:`pattern_blocks` with the gather/scatter indices of each group, cached."""
    key = (masks.shape, masks.tobytes(), live.tobytes(), per)
    hit = _BLOCK_CACHE.get(key)
    if hit is not None:
        return hit
    p = masks.shape[1]
    vpos = _vech_index(p)
    mv = p * (p + 1) // 2
    out = []
    for part, groups in pattern_blocks(masks, live, per):
        full = []
        for pos, js, o in groups:
            Pg, q = o.shape
            flat = (o[:, :, None] * p + o[:, None, :]).reshape(-1)
            iu, ju = np.triu_indices(q)
            vsrc = (np.arange(Pg)[:, None] * (q * q) + (iu * q + ju)[None, :]).reshape(-1)
            vdest = (pos[:, None] * mv + vpos[o[:, iu], o[:, ju]]).reshape(-1)
            scat_g = np.zeros((Pg * q * q, mv))  # upper-triangle entries of each block -> vech of G
            scat_g[vsrc, vpos[o[:, iu], o[:, ju]].reshape(-1)] = 1.0
            scat_v = np.zeros((Pg * q, p))
            scat_v[np.arange(Pg * q), o.reshape(-1)] = 1.0
            full.append((pos, js, o, flat, vsrc, vdest, scat_g, scat_v))
        out.append((part, full))
    if len(_BLOCK_CACHE) > 256:
        _BLOCK_CACHE.clear()
    _BLOCK_CACHE[key] = out
    return out


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
    by_pattern = np.argsort(idx, kind="stable")  # rows of pattern j: one slice of this order
    ends = np.searchsorted(idx[by_pattern], np.arange(len(masks) + 1), side="left")
    for j, mask in enumerate(masks):
        rows = by_pattern[ends[j]:ends[j + 1]]
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
            # gm_i gm_j D_k,ij summed over (i, j) as one matrix product (twice as fast as einsum)
            quad = (gm[:, :, None] * gm[:, None, :]).reshape(len(rows), q * q) @ Ds.reshape(k, q * q).T
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
