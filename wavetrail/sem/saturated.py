"""Reference models for fit indices: the saturated and the independence model.

* Saturated: unrestricted mean vector and covariance matrix. With complete data
  its ML estimate is the sample mean and the (divide-by-N) covariance; with
  missing entries it is found by the EM algorithm (Dempster, Laird & Rubin 1977,
  JRSS B 39(1); Little & Rubin 2019, *Statistical Analysis with Missing Data*,
  3rd ed., Wiley, ch. 11), run on the pattern sufficient statistics.
  For up to ``MOMENT_PATH_MAX_P`` variables the EM estimate is replaced by
  Fisher scoring on the same likelihood (the engine's batched optimiser with
  every mean and covariance free), started where EM starts; it reaches the same
  maximum in a handful of iterations where EM needs hundreds. EM remains the
  fallback when scoring does not converge, and the path for more variables.
* Independence (baseline): free means and variances, zero covariances. Its
  likelihood factorises over variables, so with missing entries each variable's
  ML mean and variance are those of its observed values.
"""

from __future__ import annotations

import numpy as np

from wavetrail.sem.likelihood import LOG2PI, MOMENT_PATH_MAX_P


class _Groups:
    """The patterns of one sample grouped by their number of observed variables.

    Each group holds, stacked over its ``G`` patterns, the observed and missing
    indices ``o`` (G, q) and ``u`` (G, p - q), the counts, the observed sums
    (G, q) and cross products (G, q, q), so that the EM step and the
    log-likelihood run one batched linear-algebra call per group instead of one
    Python iteration per pattern (a large panel has thousands of patterns).
    ``flat_uo`` and ``flat_uu`` are the positions of the (missing, observed) and
    (missing, missing) blocks in a raveled ``p x p`` matrix (for ``bincount``);
    ``sums``/``cross`` are the totals of the observed entries (fixed over EM).
    """

    def __init__(self, stats, b=0):
        self.p = p = stats.p
        masks = stats.masks
        n = stats.n[b]
        keep = np.nonzero(n > 0)[0]
        q_of = masks[keep].sum(axis=1)
        self.sums = stats.sums[b, keep].sum(axis=0)
        self.cross = stats.cross[b, keep].sum(axis=0)
        self.groups = []
        for q in np.unique(q_of):
            js = keep[q_of == q]
            m = masks[js]
            o = np.nonzero(m)[1].reshape(len(js), q)
            u = np.nonzero(~m)[1].reshape(len(js), p - q)
            so = np.take_along_axis(stats.sums[b, js], o, axis=1)
            cross = stats.cross[b, js]
            coo = cross[np.arange(len(js))[:, None, None], o[:, :, None], o[:, None, :]]
            flat_uo = (u[:, :, None] * p + o[:, None, :]).ravel()
            flat_uu = (u[:, :, None] * p + u[:, None, :]).ravel()
            self.groups.append((int(q), n[js].astype(float), o, u, so, coo, flat_uo, flat_uu))


def _gather(mat, rows, cols):
    """``mat[rows_g][:, cols_g]`` for every g: (G, len(rows), len(cols))."""
    return mat[rows[:, :, None], cols[:, None, :]]


def _loglik(stats, mu, sigma, b=0, groups=None):
    groups = groups or _Groups(stats, b)
    ll = 0.0
    for q, n, o, _, so, coo, _, _ in groups.groups:
        if q == 0:
            continue
        S = _gather(sigma, o, o)
        m = mu[o]
        sign, logdet = np.linalg.slogdet(S)
        if (sign <= 0).any():
            return -np.inf
        ms = m[:, :, None] * so[:, None, :]
        Sc = coo - ms - ms.transpose(0, 2, 1) + n[:, None, None] * (m[:, :, None] * m[:, None, :])
        try:
            tr = np.trace(np.linalg.solve(S, Sc), axis1=1, axis2=2)
        except np.linalg.LinAlgError:
            return -np.inf
        ll += float(np.sum(-0.5 * (n * q * LOG2PI + n * logdet + tr)))
    return float(ll)


class Saturated(tuple):
    """``(mu, sigma, loglik, n_iter, converged)``; ``.note`` says why it is not available (or "")."""

    note: str = ""

    def __new__(cls, mu, sigma, loglik, n_iter, converged, note=""):
        out = super().__new__(cls, (mu, sigma, loglik, n_iter, converged))
        out.note = note
        return out


#: a sample covariance counts as singular when its smallest eigenvalue, as a correlation
#: matrix, is at most this
SINGULAR = 1e-10


def missing_maximum(stats, b=0):
    """Why the saturated likelihood has no maximum, or ``""`` when this check finds no reason.

    For the people who observe at least the variables ``o`` of a pattern, the
    saturated likelihood grows without bound when their values on ``o`` lie in an
    affine hyperplane (their sample covariance on ``o`` is singular; always so
    with ``|o|`` people or fewer): the covariance can collapse along the normal
    of that plane, which raises their log-likelihood without limit while every
    pattern that misses one of ``o`` keeps a non-singular covariance. Any such
    set of variables has one pattern's observed set as a witness, so checking
    each pattern suffices. (Sufficient for non-existence; the iterations below
    still guard against other degenerate cases.)
    """
    masks = stats.masks
    if _complete_cases_regular(stats, b):
        return ""
    for j, mask in enumerate(masks):
        if stats.n[b, j] <= 0:
            continue
        o = np.nonzero(mask)[0]
        cover = np.nonzero((masks[:, o].all(axis=1)) & (stats.n[b] > 0))[0]
        n = float(stats.n[b, cover].sum())
        names = "all variables" if len(o) == stats.p else f"variables {', '.join(str(i + 1) for i in o)}"
        if n <= len(o):
            return (f"only {int(n)} people observe {names} ({len(o)} variables): their sample covariance is "
                    "not positive definite, so the saturated model's likelihood has no maximum")
        s = stats.sums[b, cover][:, o].sum(axis=0)
        C = stats.cross[b, cover][:, o][:, :, o].sum(axis=0)
        m = s / n
        S = C / n - np.outer(m, m)
        d = np.sqrt(np.maximum(np.diag(S), 0))
        if (d <= 1e-12 * max(np.abs(m).max(), 1.0)).any():
            return (f"a variable is constant among the {int(n)} people who observe {names}: their sample "
                    "covariance is not positive definite, so the saturated model's likelihood has no maximum")
        ev = np.linalg.eigvalsh(S / np.outer(d, d))
        if ev[0] <= SINGULAR:
            return (f"the sample covariance of the {int(n)} people who observe {names} is not positive "
                    "definite (singular), so the saturated model's likelihood has no maximum")
    return ""


def _complete_cases_regular(stats, b=0):
    """True when the people who observe every variable have a regular sample covariance.

    Their scatter matrix is a principal part of the scatter of the people covering
    any pattern (a superset of people, about its own mean), so every pattern's
    covering people then have a positive definite covariance as well, and the
    pattern-by-pattern search of :func:`missing_maximum` has nothing to find. This
    answers at once for the usual panel, where many people answer everything.
    """
    full = np.nonzero(stats.masks.all(axis=1) & (stats.n[b] > 0))[0]
    if len(full) == 0:
        return False
    k = full[0]
    n = float(stats.n[b, k])
    if n <= stats.p:
        return False
    m = stats.sums[b, k] / n
    S = stats.cross[b, k] / n - np.outer(m, m)
    d = np.sqrt(np.maximum(np.diag(S), 0))
    if (d <= 1e-12 * max(np.abs(m).max(), 1.0)).any():
        return False
    return bool(np.linalg.eigvalsh(S / np.outer(d, d))[0] > SINGULAR)


def _em_step(stats, b, mu, sigma, N, groups=None):
    """One EM update of (mu, sigma) from the pattern sufficient statistics.

    For a pattern with observed ``o`` and missing ``u`` the E-step completes each
    row by the regression ``x_u = c + B x_o`` (``B = S_uo S_oo^-1``,
    ``c = mu_u - B mu_o``, residual covariance ``R = S_uu - B S_ou``): the expected
    sums of the missing entries are ``n c + B s_o``, the expected cross products
    ``c s_o' + B C_oo`` on (u, o) and ``n R + n c c' + c (B s_o)' + (B s_o) c' +
    B C_oo B'`` on (u, u). The observed entries add their own sums, which do not
    change over the iterations. Batched over the patterns of a group; the blocks
    are added into ``p x p`` by ``bincount`` on their raveled positions.
    """
    groups = groups or _Groups(stats, b)
    p = stats.p
    T1 = groups.sums.copy()
    T2 = groups.cross.ravel().copy()
    for q, n, o, u, so, coo, flat_uo, flat_uu in groups.groups:
        r = p - q
        if r == 0:
            continue
        if q == 0:
            T1 += n.sum() * mu
            T2 += n.sum() * (sigma + np.outer(mu, mu)).ravel()
            continue
        Sou = _gather(sigma, o, u)
        Bt = np.linalg.solve(_gather(sigma, o, o), Sou)  # (G, q, r): B' of each pattern
        B = Bt.transpose(0, 2, 1)
        c = mu[u] - (B @ mu[o][:, :, None])[:, :, 0]
        Bs = (B @ so[:, :, None])[:, :, 0]
        np.add.at(T1, u.ravel(), (n[:, None] * c + Bs).ravel())
        BC = B @ coo
        Cuo = c[:, :, None] * so[:, None, :] + BC
        cBs = c[:, :, None] * Bs[:, None, :]
        Cuu = (n[:, None, None] * (_gather(sigma, u, u) - B @ Sou + c[:, :, None] * c[:, None, :])
               + cBs + cBs.transpose(0, 2, 1) + BC @ Bt)
        uo = np.bincount(flat_uo, weights=Cuo.ravel(), minlength=p * p)
        T2 += uo + uo.reshape(p, p).T.ravel()
        T2 += np.bincount(flat_uu, weights=Cuu.ravel(), minlength=p * p)
    mu = T1 / N
    sigma = T2.reshape(p, p) / N - np.outer(mu, mu)
    return mu, 0.5 * (sigma + sigma.T)


def _pack(mu, sigma):
    iu = np.triu_indices(len(mu))
    return np.concatenate([mu, sigma[iu]])


def _unpack(x, p):
    iu = np.triu_indices(p)
    sigma = np.zeros((p, p))
    sigma[iu] = x[p:]
    sigma = sigma + np.triu(sigma, 1).T
    return x[:p].copy(), sigma


def saturated(stats, b=0, max_iter=5000, tol=1e-11):
    """ML mean and covariance of one sample.

    Complete data: the sample moments. Missing entries: Fisher scoring (up to
    ``MOMENT_PATH_MAX_P`` variables), else EM accelerated by SQUAREM (Varadhan &
    Roland 2008, Scandinavian Journal of Statistics 35(2); the S3 step length with
    a fall-back to the plain EM step whenever the extrapolation lowers the
    log-likelihood), stopped when the log-likelihood changes by less than
    ``tol * (1 + |loglik|)`` over one cycle. When the likelihood has no maximum
    (:func:`missing_maximum`, or the covariance collapses while iterating) the
    log-likelihood is NaN and ``.note`` says why.

    Returns
    -------
    :class:`Saturated`: mu (p,), sigma (p, p), loglik, n_iter, converged (unpacks as a 5-tuple)
    """
    p = stats.p
    N = stats.n[b].sum()
    full = stats.masks.all(axis=1)
    why = missing_maximum(stats, b)
    if full.all():
        mu = stats.sums[b].sum(axis=0) / N
        sigma = stats.cross[b].sum(axis=0) / N - np.outer(mu, mu)
        if why:
            return Saturated(mu, sigma, np.nan, 0, False, why)
        return Saturated(mu, sigma, _loglik(stats, mu, sigma, b), 0, True)
    mean, cov, _ = stats.pairwise_moments()
    mu, sigma = mean[b].copy(), cov[b].copy()
    if why:
        return Saturated(mu, sigma, np.nan, 0, False, why)
    ev, vec = np.linalg.eigh(sigma)
    sigma = (vec * np.maximum(ev, 1e-3 * max(ev.max(), 1e-12))) @ vec.T
    em = _squarem(stats, b, mu, sigma, N, max_iter, tol)
    if p <= MOMENT_PATH_MAX_P and not em.note.startswith("the saturated model's covariance collapses"):
        # a few scoring steps from the EM end: the accuracy of the scoring test (decrement <= 1e-10)
        start = (em[0], em[1]) if em[4] else (mu, sigma)
        scored = _by_scoring(stats, b, *start, tol)
        if scored is not None and not (em[4] and scored[2] < em[2]):
            return Saturated(scored[0], scored[1], scored[2], em[3] + scored[3], True)
    return em


def _collapsed(sigma):
    d = np.sqrt(np.maximum(np.diag(sigma), 1e-300))
    return np.linalg.eigvalsh(sigma / np.outer(d, d))[0] <= SINGULAR


def _squarem(stats, b, mu, sigma, N, max_iter, tol):
    """EM with SQUAREM extrapolation (two EM steps and one extrapolated point per cycle)."""
    p = stats.p
    groups = _Groups(stats, b)
    x = _pack(mu, sigma)
    ll_old = _loglik(stats, mu, sigma, b, groups)

    def F(x):
        return _pack(*_em_step(stats, b, *_unpack(x, p), N, groups))

    it = 0
    while it < max_iter:
        x1 = F(x)
        x2 = F(x1)
        it += 2
        r = x1 - x
        v = x2 - x1 - r
        nv = float(np.sqrt(v @ v))
        cand = x2
        if nv > 0:
            alpha = -max(1.0, float(np.sqrt(r @ r)) / nv)  # S3 step length, at least a plain EM step
            y = x - 2 * alpha * r + alpha * alpha * v
            try:
                y = F(y)  # one EM step from the extrapolated point keeps it stable
                it += 1
                ll_y = _loglik(stats, *_unpack(y, p), b, groups)
                ll_2 = _loglik(stats, *_unpack(x2, p), b, groups)
                if ll_y >= ll_2:
                    cand, ll = y, ll_y
                else:
                    ll = ll_2
            except np.linalg.LinAlgError:
                ll = _loglik(stats, *_unpack(x2, p), b, groups)
        else:
            ll = _loglik(stats, *_unpack(x2, p), b, groups)
        mu, sigma = _unpack(cand, p)
        x = cand
        if not np.isfinite(ll) or _collapsed(sigma):
            return Saturated(mu, sigma, np.nan, it, False, "the saturated model's covariance collapses while "
                             "iterating: its likelihood has no maximum")
        if abs(ll - ll_old) < tol * (1.0 + abs(ll)):
            return Saturated(mu, sigma, ll, it, True)
        ll_old = ll
    return Saturated(mu, sigma, ll_old, it, False, f"EM did not converge in {max_iter} iterations")


def _saturated_spec(p):
    from wavetrail.sem.spec import ModelSpec

    names = [f"v{i}" for i in range(p)]
    spec = ModelSpec(observed=names)
    for i, a in enumerate(names):
        spec.intercept(a)
        for c in names[i:]:
            spec.cov(a, c)
    return spec


def _by_scoring(stats, b, mu, sigma, tol):
    """Saturated ML by batched Fisher scoring from (mu, sigma); None if it fails."""
    from wavetrail.sem.optimise import fit_batch

    spec = _saturated_spec(stats.p)
    cm = spec.compile()
    start = np.zeros(cm.k)
    for e in cm.entries:
        start[e.param] = mu[e.row] if e.kind == "intercept" else sigma[e.row, e.col]
    one = stats if stats.B == 1 else stats.take(np.array([b]))
    bf = fit_batch(spec, one, start=start, max_iter=200, tol=min(tol, 1e-12))
    if not (bf.converged[0] and np.isfinite(bf.loglik[0])):
        return None
    m, s = spec.implied(bf.theta[0])
    return m, 0.5 * (s + s.T), float(bf.loglik[0]), int(bf.n_iter), True


def independence(stats, b=0):
    """ML means and variances of the independence model and its log-likelihood.

    Returns
    -------
    mu (p,), var (p,), loglik
    """
    M = stats.masks.astype(float)
    n_i = stats.n[b] @ M
    s_i = np.einsum("P,Pi->i", np.ones(stats.P), stats.sums[b])
    c_i = np.einsum("Pii->i", stats.cross[b])
    mu = s_i / n_i
    var = c_i / n_i - mu ** 2
    ll = float(-0.5 * np.sum(n_i * (LOG2PI + np.log(var) + 1.0)))
    return mu, var, ll
