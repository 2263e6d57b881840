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


def _loglik(stats, mu, sigma, b=0):
    ll = 0.0
    for j, mask in enumerate(stats.masks):
        n = stats.n[b, j]
        if n <= 0:
            continue
        o = np.nonzero(mask)[0]
        S = sigma[np.ix_(o, o)]
        m = mu[o]
        s = stats.sums[b, j, o]
        C = stats.cross[b, j][np.ix_(o, o)]
        sign, logdet = np.linalg.slogdet(S)
        if sign <= 0:
            return -np.inf
        Sc = C - np.outer(s, m) - np.outer(m, s) + n * np.outer(m, m)
        ll += -0.5 * (n * len(o) * LOG2PI + n * logdet + np.trace(np.linalg.solve(S, Sc)))
    return float(ll)


def saturated(stats, b=0, max_iter=5000, tol=1e-11):
    """ML mean and covariance of one sample (EM when entries are missing).

    Returns
    -------
    mu (p,), sigma (p, p), loglik, n_iter, converged
    """
    p = stats.p
    N = stats.n[b].sum()
    full = stats.masks.all(axis=1)
    if full.all():
        mu = stats.sums[b].sum(axis=0) / N
        sigma = stats.cross[b].sum(axis=0) / N - np.outer(mu, mu)
        return mu, sigma, _loglik(stats, mu, sigma, b), 0, True
    mean, cov, _ = stats.pairwise_moments()
    mu, sigma = mean[b].copy(), cov[b].copy()
    ev, vec = np.linalg.eigh(sigma)
    sigma = (vec * np.maximum(ev, 1e-3 * max(ev.max(), 1e-12))) @ vec.T
    if p <= MOMENT_PATH_MAX_P:
        scored = _by_scoring(stats, b, mu, sigma, tol)
        if scored is not None:
            return scored
    ll_old = _loglik(stats, mu, sigma, b)
    it, ok = 0, False
    for it in range(1, max_iter + 1):
        T1 = np.zeros(p)
        T2 = np.zeros((p, p))
        for j, mask in enumerate(stats.masks):
            n = stats.n[b, j]
            if n <= 0:
                continue
            o = np.nonzero(mask)[0]
            u = np.nonzero(~mask)[0]
            s = stats.sums[b, j]
            C = stats.cross[b, j]
            if len(u) == 0:
                T1 += s
                T2 += C
                continue
            Soo = sigma[np.ix_(o, o)]
            Bmat = np.linalg.lstsq(Soo, sigma[np.ix_(o, u)], rcond=None)[0].T  # (u, o) regression of u on o
            c = mu[u] - Bmat @ mu[o]
            resid = sigma[np.ix_(u, u)] - Bmat @ sigma[np.ix_(o, u)]
            so = s[o]
            Coo = C[np.ix_(o, o)]
            su = n * c + Bmat @ so  # expected sum of missing entries
            Cuo = np.outer(c, so) + Bmat @ Coo
            Cuu = n * resid + n * np.outer(c, c) + np.outer(c, so @ Bmat.T) + np.outer(Bmat @ so, c) + Bmat @ Coo @ Bmat.T
            T1[o] += so
            T1[u] += su
            T2[np.ix_(o, o)] += Coo
            T2[np.ix_(u, o)] += Cuo
            T2[np.ix_(o, u)] += Cuo.T
            T2[np.ix_(u, u)] += Cuu
        mu = T1 / N
        sigma = T2 / N - np.outer(mu, mu)
        sigma = 0.5 * (sigma + sigma.T)
        ll = _loglik(stats, mu, sigma, b)
        if abs(ll - ll_old) < tol * (1.0 + abs(ll)):
            ok = True
            ll_old = ll
            break
        ll_old = ll
    return mu, sigma, ll_old, it, ok


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
    bf = fit_batch(spec, one, start=start, max_iter=200, tol=min(tol, 1e-10))
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
