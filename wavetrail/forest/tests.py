"""Score-based instability tests: does a predictor order the node's casewise scores?

At a node fitted by maximum likelihood the casewise scores (each person's
gradient of the log-likelihood at the node estimate) sum to zero. Ordered by a
predictor that moderates the model, their cumulative sum drifts away from zero;
under no moderation it behaves like a Brownian bridge. Three statistics:

* numeric predictors: supLM, the largest Lagrange-multiplier statistic over
  all cut points between distinct values in the central ``1 - 2 * trim`` of the
  observed people (trim 10 %);
* ordered categories: maxLM, the largest LM statistic over the boundaries
  between adjacent levels;
* unordered categories: the LM statistic summed over levels, chi-square with
  ``k (C - 1)`` degrees of freedom.

Notes
-----
With ``S`` the scores whitened by the outer-product information
``J = S'S / n`` (``S J^{-1/2}``; directions with no information are dropped,
which lowers ``k``) and ``c_i`` the cumulative whitened score of the first
``i`` of ``n`` people in predictor order, the bridge is
``b_i = c_i - (i / n) c_n`` and ``LM_i = ||b_i||^2 / (n t (1 - t))`` with
``t = i / n``. People whose predictor is missing are left out of that
predictor's test (the bridge is tied down over the observed people; the
information is the node's).

p-values. supLM over the cut range actually searched, ``[t_lo, t_hi]`` (the
first and last admissible cut after the 10 % trim, the minimum node size and
ties): the law of the supremum depends on the range only through
``lambda = t_hi (1 - t_lo) / (t_lo (1 - t_hi))`` (Andrews 1993; Hansen 1997),
so the simulated multi-trim null table of :mod:`wavetrail.forest._supLM_table`
is interpolated in ``log(lambda)`` (towards ``chi2_k`` at ``lambda = 1``) and
on the log-probability scale, with a chi-square-like tail beyond its last
quantile. The Bonferroni bound ``m * P(chi2_k > x)`` over the ``m`` evaluated
points is also computed; both bound the same tail probability, so the smaller
is kept. When at most 12 cut points are evaluated (the boundaries of an ordered
category, a number with few distinct values), the p-value is instead the exact
asymptotic law of the maximum over exactly those points (:func:`maxlm_pvalue`),
so these tests are neither conservative nor liberal.

References
----------
.. [1] Zeileis, A., Hothorn, T., & Hornik, K. (2008). Model-based recursive
   partitioning. Journal of Computational and Graphical Statistics, 17(2), 492-514.
.. [2] Arnold, M., Voelkle, M. C., & Brandmaier, A. M. (2021). Score-guided
   structural equation model trees. Frontiers in Psychology, 11, 564403.
.. [3] Andrews, D. W. K. (1993). Tests for parameter instability and structural
   change with unknown change point. Econometrica, 61(4), 821-856.
.. [4] Hansen, B. E. (1997). Approximate asymptotic p values for structural-change
   tests. Journal of Business & Economic Statistics, 15(1), 60-67.
"""

from __future__ import annotations

import math

import numpy as np
from scipy.special import chdtrc, gammaln, ive
from scipy.stats import chi2

from wavetrail.forest import _supLM_table as _table

TRIM = 0.1  # trimming of the cut-point range (10 %, the usual default)
_LOG_TAIL = np.log(np.asarray(_table.TAIL))
_ALLQ = np.asarray(_table.QUANTILES)  # (trim, k, tail)
_QUANT = _ALLQ[_table.TRIMS.index(TRIM)]  # (k, tail) at the default trim
#: log(lambda) of each tabulated symmetric trim, lambda = ((1 - trim) / trim)^2, ascending
_LOG_LAMBDA = np.asarray([2.0 * math.log((1 - tr) / tr) for tr in _table.TRIMS])[::-1]


def range_lambda(t_lo: float, t_hi: float) -> float:
    """``lambda = t_hi (1 - t_lo) / (t_lo (1 - t_hi))`` of the cut range ``[t_lo, t_hi]``.

    The sup of ``||B(t)||^2 / (t (1 - t))`` over ``[t_lo, t_hi]`` depends on the
    range only through ``lambda`` (Andrews 1993, Hansen 1997): in log-odds time
    the normalised bridge is stationary. ``lambda = 1`` is a single point.
    """
    t_lo = min(max(float(t_lo), 1e-12), 1 - 1e-12)
    t_hi = min(max(float(t_hi), t_lo), 1 - 1e-12)
    return t_hi * (1 - t_lo) / (t_lo * (1 - t_hi))


def _quantiles_at(k: int, lam: float) -> np.ndarray:
    """Null quantiles (at the TAIL probabilities) of supLM with ``k`` parameters over a range of ``lam``.

    Linear interpolation in ``log(lambda)`` between the tabulated trims; below the
    narrowest tabulated range, towards ``lambda = 1`` where the statistic is ``chi2_k``.
    """
    ll = math.log(max(lam, 1.0))
    tab = _ALLQ[::-1, k - 1, :]  # ascending in lambda
    if ll >= _LOG_LAMBDA[-1]:
        return tab[-1]  # the widest tabulated range (a wider one cannot occur with TRIM = 0.1)
    if ll <= _LOG_LAMBDA[0]:
        q1 = chi2.isf(np.asarray(_table.TAIL), k)
        w = ll / _LOG_LAMBDA[0]
        return (1 - w) * q1 + w * tab[0]
    j = int(np.searchsorted(_LOG_LAMBDA, ll)) - 1
    w = (ll - _LOG_LAMBDA[j]) / (_LOG_LAMBDA[j + 1] - _LOG_LAMBDA[j])
    return (1 - w) * tab[j] + w * tab[j + 1]


def whiten(scores: np.ndarray, tol: float = 1e-9) -> np.ndarray:
    """Scores times ``J^{-1/2}`` (``J = S'S/n``); columns without information dropped."""
    S = np.asarray(scores, dtype=float)
    n = S.shape[0]
    if n == 0:
        return S[:, :0]
    J = S.T @ S / n
    w, V = np.linalg.eigh(J)
    keep = w > tol * max(w.max(initial=0.0), 1e-300)
    if not keep.any():
        return S[:, :0]
    return S @ (V[:, keep] / np.sqrt(w[keep]))


def suplm_pvalue(stat: float, k: int, n_points: int | None = None, lam: float | None = None) -> float:
    """p-value of a supLM statistic with ``k`` parameters.

    ``lam`` is the ``lambda`` of the cut range actually searched (see
    :func:`range_lambda`); default the symmetric 10 % trim. ``n_points`` is the
    number of cut points actually evaluated; when given, the Bonferroni bound
    over them is also computed and the smaller value returned (both bound the
    same tail probability).
    """
    if k < 1 or not np.isfinite(stat) or stat <= 0:
        return 1.0
    if lam is None:
        lam = ((1 - TRIM) / TRIM) ** 2
    p = _table_p(float(stat), int(k), float(lam))
    if n_points is not None and n_points > 0:
        p = min(p, n_points * float(chi2.sf(stat, k)))
    return float(min(max(p, 0.0), 1.0))


def _table_p(x: float, k: int, lam: float | None = None) -> float:
    if lam is None:
        lam = ((1 - TRIM) / TRIM) ** 2
    if lam <= 1.0 + 1e-12:
        return float(chi2.sf(x, k))  # a single cut point: the LM statistic is chi2_k
    if k > _ALLQ.shape[1]:
        # beyond the table: Bonferroni-type bound of chi2_k over the range
        # (about (k + 1) log(lambda) effectively independent points; conservative)
        return min(1.0, float(chi2.sf(x, k)) * (1.0 + math.log(max(lam, 1.0))) * (k + 1))
    q = _quantiles_at(k, lam)
    if x <= q[0]:
        # between 0 and the 99 % point: interpolate towards p = 1 at x = 0
        return float(1.0 - (1.0 - _table.TAIL[0]) * x / q[0])
    if x <= q[-1]:
        return float(np.exp(np.interp(x, q, _LOG_TAIL)))
    # beyond the last tabulated point: tail like x^(k/2) exp(-x/2)
    xl = q[-1]
    logp = _LOG_TAIL[-1] - (x - xl) / 2.0 + (k / 2.0) * math.log(x / xl)
    return float(math.exp(min(logp, _LOG_TAIL[-1])))


#: largest number of evaluated cut points whose maximum gets the exact law (:func:`maxlm_pvalue`)
EXACT_MAX_POINTS = 12
#: largest correlation of neighbouring cut statistics the quadrature resolves
_RHO_MAX = 0.95
#: Gauss-Legendre nodes on [-1, 1] (24 reproduce a 128-node reference to 1e-6, relative 2e-4, for rho <= 0.93)
_GL_X, _GL_W = np.polynomial.legendre.leggauss(24)


def _chi2_pdf(r, k):
    return np.exp((k / 2.0 - 1.0) * np.log(r) - r / 2.0 - (k / 2.0) * math.log(2.0) - gammaln(k / 2.0))


def _ncx2_pdf(y, k, lam):
    """Noncentral chi-square density (``y, lam > 0``) through the scaled Bessel function."""
    z = np.sqrt(lam * y)
    return 0.5 * np.exp(-(y + lam) / 2.0 + z + (k / 4.0 - 0.5) * np.log(y / lam)) * ive(k / 2.0 - 1.0, z)


def maxlm_pvalue(stat: float, k: int, shares) -> float | None:
    """Asymptotic p-value of the largest LM statistic over a fixed set of cut points.

    Under no moderation the whitened score bridge at left shares ``t_1 < ... < t_m``
    gives ``Z_i = B(t_i) / sqrt(t_i (1 - t_i))``, standard normal in ``k``
    dimensions, and ``Z_i = rho_i Z_{i-1} + sqrt(1 - rho_i^2) E_i`` with
    ``rho_i^2 = t_{i-1} (1 - t_i) / (t_i (1 - t_{i-1}))`` (the bridge is Markov).
    By rotational symmetry the squared norms ``r_i = ||Z_i||^2`` (the LM
    statistics) are then a Markov chain: ``r_i / (1 - rho_i^2)`` given ``r_{i-1}``
    is noncentral chi-square with ``k`` degrees of freedom and noncentrality
    ``rho_i^2 r_{i-1} / (1 - rho_i^2)``. ``P(max_i r_i <= x)`` is the chain's
    probability of staying in ``[0, x]``, computed by Gauss-Legendre quadrature
    in ``u = sqrt(r)``. The result is kept between the two bounds
    ``max_i P(r_i > x)`` and ``m P(chi2_k > x)``.

    Returns None when neighbouring cuts are too close for the quadrature
    (``rho > 0.95``); the caller then uses the bounds of :func:`suplm_pvalue`.
    """
    t = np.sort(np.asarray(shares, dtype=float))
    x, k = float(stat), int(k)
    if k < 1 or not np.isfinite(x) or x <= 0:
        return 1.0
    single = float(chdtrc(k, x))
    if len(t) == 1:
        return single
    rho2 = t[:-1] * (1 - t[1:]) / (t[1:] * (1 - t[:-1]))
    if math.sqrt(float(rho2.max())) > _RHO_MAX:
        return None
    half = math.sqrt(x) / 2.0
    u = half * (_GL_X + 1.0)
    w = half * _GL_W
    r = u * u
    dens = _chi2_pdf(r, k) * 2.0 * u  # density of u = sqrt(r_1)
    for q in rho2:
        s2 = 1.0 - q
        T = _ncx2_pdf(r[:, None] / s2, k, q * r[None, :] / s2) / s2 * (2.0 * u[:, None])
        dens = T @ (w * dens)
    p = 1.0 - float(np.sum(w * dens))
    return float(min(max(p, single), len(t) * single, 1.0))


def _bridge_lm(Sw: np.ndarray, Z: np.ndarray):
    """Cumulative LM statistics of whitened scores ordered by each column of Z.

    Returns ``(lm, zs, n_obs)``: ``lm[i, j]`` is the LM statistic of predictor
    ``j`` with the first ``i + 1`` observed people on the left, ``zs`` the sorted
    values (NaN last) and ``n_obs`` the number observed per predictor.
    """
    n, m = Z.shape
    order = np.argsort(Z, axis=0, kind="stable")  # NaN sorts last
    zs = np.take_along_axis(Z, order, axis=0)
    n_obs = (~np.isnan(zs)).sum(axis=0)
    nobs = np.maximum(n_obs, 1).astype(float)
    i = np.arange(1, n + 1, dtype=float)
    lm = np.empty((n, m))
    # one predictor at a time, in place: an (n, k) array instead of several (n, m, k) ones
    for j in range(m):
        c = Sw[order[:, j]]
        c[n_obs[j]:] = 0.0  # people missing the predictor (sorted last) add nothing
        np.cumsum(c, axis=0, out=c)
        t = i / nobs[j]
        c -= t[:, None] * c[-1]  # the bridge: left sums minus their share of the total
        with np.errstate(divide="ignore", invalid="ignore"):
            lm[:, j] = np.einsum("ik,ik->i", c, c) / (nobs[j] * t * (1.0 - t))
    return lm, zs, n_obs


def _admissible(zs: np.ndarray, n_obs: np.ndarray, lo: np.ndarray, hi: np.ndarray) -> np.ndarray:
    """Mask of left counts i+1 in [lo, hi] where the sorted value changes after row i."""
    n = zs.shape[0]
    change = np.zeros_like(zs, dtype=bool)
    if n > 1:
        change[:-1] = zs[1:] > zs[:-1]  # NaN comparisons are False
    i = np.arange(1, n + 1)[:, None]
    return change & (i >= lo[None, :]) & (i <= hi[None, :])


def ordered_tests(Sw: np.ndarray, Z: np.ndarray, kinds: list[str], min_size: int = 1):
    """supLM (numeric) and maxLM (ordered) statistics and p-values for columns of Z.

    Parameters
    ----------
    Sw : (n, k) whitened casewise scores at the node fit.
    Z : (n, m) predictor values (numbers or level codes, NaN = missing).
    kinds : per column, ``"numeric"`` or ``"ordered"``.
    min_size : smallest allowed child; cut points leaving fewer are not evaluated.

    Returns
    -------
    stat, p, n_points : arrays of length m.
    """
    n, m = Z.shape
    k = Sw.shape[1]
    if m == 0:
        return np.zeros(0), np.ones(0), np.zeros(0, dtype=int)
    lm, zs, n_obs = _bridge_lm(Sw, Z)
    numeric = np.array([kd == "numeric" for kd in kinds])
    lo = np.where(numeric, np.maximum(np.ceil(TRIM * n_obs), min_size), min_size).astype(int)
    hi = np.where(numeric, np.minimum(np.floor((1 - TRIM) * n_obs), n_obs - min_size),
                  n_obs - min_size).astype(int)
    ok = _admissible(zs, n_obs, np.maximum(lo, 1), hi)
    vals = np.where(ok, lm, -np.inf)
    stat = vals.max(axis=0)
    npts = ok.sum(axis=0)
    p = np.ones(m)
    pos = np.arange(1, n + 1)
    for j in range(m):
        if npts[j] == 0 or k == 0:
            stat[j] = 0.0
            continue
        # the range actually searched: first and last admissible cut (left share t)
        at = pos[ok[:, j]]
        if npts[j] <= EXACT_MAX_POINTS:
            # few cuts (an ordered category, a number with few values): the exact law of their maximum
            exact = maxlm_pvalue(stat[j], k, at / n_obs[j])
            if exact is not None:
                p[j] = exact
                continue
        lam = range_lambda(at[0] / n_obs[j], at[-1] / n_obs[j])
        # the sup over the continuous range bounds the max over the admissible
        # cuts inside it, and so does Bonferroni over those cuts
        p[j] = suplm_pvalue(stat[j], k, int(npts[j]), lam=lam)
    return stat, p, npts


def unordered_test(Sw: np.ndarray, codes: np.ndarray, min_size: int = 1):
    """LM statistic over the levels of an unordered category; returns (stat, p, df).

    Levels with no observed person are ignored; the test is skipped (p = 1) when
    fewer than two levels remain or no two-group split could give both children
    ``min_size`` people.
    """
    obs = ~np.isnan(codes)
    k = Sw.shape[1]
    if obs.sum() < 2 * max(min_size, 1) or k == 0:
        return 0.0, 1.0, 0
    S = Sw[obs]
    c = codes[obs].astype(np.int64)
    n = S.shape[0]
    levels, inv, counts = np.unique(c, return_inverse=True, return_counts=True)
    if len(levels) < 2:
        return 0.0, 1.0, 0
    sums = np.zeros((len(levels), k))
    np.add.at(sums, inv, S)
    sums -= counts[:, None] * (S.sum(axis=0) / n)[None, :]
    stat = float(np.sum(np.einsum("ck,ck->c", sums, sums) / counts))
    df = k * (len(levels) - 1)
    return stat, float(chi2.sf(stat, df)), df


# ---------------------------------------------------------------- Monte Carlo (permutation) p-values

#: Besag-Clifford stopping: a Monte Carlo test stops after this many permuted statistics at
#: least as extreme as the observed one (the p-value is then ``h / permutations drawn``)
MC_EXCEED = 10
#: permutations drawn per batch (vectorised)
_MC_BATCH = 16


class NodeTests:
    """The split tests of one node for a set of candidate predictors, reusable under permutation.

    Holds everything that depends only on the predictors (sort orders, admissible
    cut masks, level indicators), so the statistics of permuted scores cost one
    cumulative sum per batch. ``stats(Sw)`` gives the per-candidate statistics;
    ``log_p(stat)`` maps them to a comparable scale (the log of a Bonferroni-type
    asymptotic p-value: ``n_points * P(chi2_k > x)`` for ordered and numeric
    predictors, ``P(chi2_df > x)`` for unordered ones). Any monotone per-predictor
    scale gives a valid permutation test; this one only balances the predictors.
    """

    def __init__(self, Z: np.ndarray, kinds: list[str], min_size: int = 1):
        self.Z = np.asarray(Z, dtype=float)
        n, m = self.Z.shape
        self.n, self.m = n, m
        self.kinds = list(kinds)
        self.ord_cols = [j for j in range(m) if kinds[j] != "unordered"]
        self.un_cols = [j for j in range(m) if kinds[j] == "unordered"]
        self.testable = np.zeros(m, dtype=bool)
        self.reason = [""] * m
        self.npts = np.zeros(m, dtype=int)
        self.df = np.zeros(m, dtype=int)
        if self.ord_cols:
            Zo = self.Z[:, self.ord_cols]
            order = np.argsort(Zo, axis=0, kind="stable")
            zs = np.take_along_axis(Zo, order, axis=0)
            obs = ~np.isnan(zs)
            n_obs = obs.sum(axis=0)
            numeric = np.array([kinds[j] == "numeric" for j in self.ord_cols])
            lo = np.where(numeric, np.maximum(np.ceil(TRIM * n_obs), min_size), min_size).astype(int)
            hi = np.where(numeric, np.minimum(np.floor((1 - TRIM) * n_obs), n_obs - min_size),
                          n_obs - min_size).astype(int)
            ok = _admissible(zs, n_obs, np.maximum(lo, 1), hi)
            self._obs, self._ok = obs, ok
            nobs = np.maximum(n_obs, 1).astype(float)
            t = np.arange(1, n + 1, dtype=float)[:, None] / nobs[None, :]
            with np.errstate(divide="ignore", invalid="ignore"):
                self._den = np.where(ok, nobs[None, :] * t * (1.0 - t), np.inf)
            self._t = t
            # cumulative sums as one matrix product: L[c, i, person] = 1 when the person is
            # observed and among the first i + 1 in column c's order
            self._order_cols = order
            self._L = None  # built on the first permuted call
            for c, j in enumerate(self.ord_cols):
                self.npts[j] = int(ok[:, c].sum())
                self.testable[j] = self.npts[j] > 0
                if not self.testable[j]:
                    self.reason[j] = self._why(zs[:, c][obs[:, c]], min_size)
        self._un = {}
        for j in self.un_cols:
            z = self.Z[:, j]
            o = ~np.isnan(z)
            levels, inv, counts = np.unique(z[o].astype(np.int64), return_inverse=True, return_counts=True)
            if len(levels) < 2:
                self.reason[j] = "no variation"
                continue
            total = int(o.sum())
            if total < 2 * max(min_size, 1):
                self.reason[j] = "node size"
                continue
            if total - int(counts.max()) < min_size:
                # every two-group partition leaves fewer than min_size people on one side
                self.reason[j] = "too few people in a category"
                continue
            H = np.zeros((len(levels), n))
            H[inv, np.flatnonzero(o)] = 1.0
            self._un[j] = (H, counts.astype(float), o.astype(float), float(o.sum()))
            self.df[j] = len(levels) - 1
            self.testable[j] = True

    @staticmethod
    def _why(values: np.ndarray, min_size: int) -> str:
        if len(np.unique(values)) < 2:
            return "no variation"
        if len(values) < 2 * max(min_size, 1):
            return "node size"
        return "too few people in a category"

    def stats(self, Sw: np.ndarray, perms: np.ndarray | None = None) -> np.ndarray:
        """Statistics (m,) of scores ``Sw``, or (P, m) of ``Sw[perm]`` for each row of ``perms``."""
        single = perms is None
        P = np.arange(self.n)[None, :] if single else np.atleast_2d(perms)
        out = np.zeros((P.shape[0], self.m))
        B, k = P.shape[0], Sw.shape[1]
        Sp = Sw[P]  # (B, n, k)
        flat = Sp.transpose(1, 0, 2).reshape(self.n, B * k)
        if self.ord_cols:
            mo = len(self.ord_cols)
            if self._L is None:
                rank = np.empty_like(self._order_cols)
                np.put_along_axis(rank, self._order_cols, np.arange(self.n)[:, None], axis=0)
                seen = ~np.isnan(self.Z[:, self.ord_cols])
                tri = np.tri(self.n)
                self._L = (tri[:, rank.T] * seen.T[None, :, :]).transpose(1, 0, 2).reshape(-1, self.n)
            C = (self._L @ flat).reshape(mo, self.n, B, k)
            b = C - self._t.T[:, :, None, None] * C[:, -1:, :, :]
            num = np.einsum("cibk,cibk->cib", b, b)
            lm = np.where(self._ok.T[:, :, None], num / self._den.T[:, :, None], -np.inf)
            st = lm.max(axis=1).T  # (B, mo)
            out[:, self.ord_cols] = np.where(np.isfinite(st), st, 0.0)
        for j, (H, counts, o, no) in self._un.items():
            sums = (H @ flat).reshape(len(counts), B, k)
            tot = (o @ flat).reshape(B, k)
            cen = sums - (counts / no)[:, None, None] * tot[None, :, :]
            out[:, j] = np.einsum("lbk,lbk->b", cen, cen / counts[:, None, None])
        return out[0] if single else out

    def log_p(self, stat: np.ndarray, k: int) -> np.ndarray:
        """Comparable scale of each column (smaller = more extreme); +inf where untestable."""
        stat = np.atleast_2d(stat)
        if k == 0:
            return np.full(stat.shape, np.inf)
        if not hasattr(self, "_dfs") or self._dfs_k != k:
            un = np.array([kd == "unordered" for kd in self.kinds])
            self._dfs = np.where(un, k * np.maximum(self.df, 1), k).astype(float)
            self._shift = np.where(un, 0.0, np.log(np.maximum(self.npts, 1)))
            self._dfs_k = k
        with np.errstate(divide="ignore"):
            out = np.log(np.maximum(chdtrc(self._dfs[None, :], stat), 1e-300)) + self._shift[None, :]
        return np.where(self.testable[None, :], out, np.inf)


def monte_carlo_min_p(tests: NodeTests, Sw: np.ndarray, rng: np.random.Generator, max_perm: int = 199,
                      exceed: int = MC_EXCEED):
    """Permutation p-value of the most extreme candidate, adjusted for the number of candidates.

    Under no moderation the predictors are exchangeable with respect to the
    people's scores, so permuting the scores (all candidates with one permutation)
    gives the null law of the smallest per-candidate scale ``min_j log_p_j``
    (Westfall & Young 1993, single-step min-P). Sampling stops early when ``exceed``
    permuted minima are at least as extreme as the observed one (Besag & Clifford
    1991): ``p = exceed / drawn``; otherwise ``p = (1 + count) / (1 + max_perm)``.

    Returns ``(best column, observed statistics (m,), adjusted p, permutations drawn)``;
    ``best`` is -1 when no candidate is testable.
    """
    k = Sw.shape[1]
    stat = tests.stats(Sw)
    lp = tests.log_p(stat, k)[0]
    if not np.isfinite(lp).any():
        return -1, stat, 1.0, 0
    order = np.lexsort((np.arange(tests.m), -stat, lp))
    best = int(order[0])
    obs_min = lp[best]
    count, drawn = 0, 0
    while drawn < max_perm:
        size = min(_MC_BATCH, max_perm - drawn)
        perms = np.argsort(rng.random((size, tests.n)), axis=1)
        mins = tests.log_p(tests.stats(Sw, perms), k).min(axis=1)
        # count in draw order so the stopping point does not depend on the batch size
        hits = np.cumsum(mins <= obs_min + 1e-12)
        if count + hits[-1] >= exceed:
            stop = int(np.searchsorted(hits, exceed - count)) + 1
            drawn += stop
            return best, stat, float(exceed / drawn), drawn
        count += int(hits[-1])
        drawn += size
    return best, stat, float((1 + count) / (1 + max_perm)), drawn
