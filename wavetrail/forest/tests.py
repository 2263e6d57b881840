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
    obs = ~np.isnan(zs)
    n_obs = obs.sum(axis=0)
    ordered = Sw[order] * obs[:, :, None]  # (n, m, k)
    c = np.cumsum(ordered, axis=0)
    total = c[-1]  # (m, k)
    i = np.arange(1, n + 1, dtype=float)[:, None]
    nobs = np.maximum(n_obs, 1).astype(float)[None, :]
    t = i / nobs
    b = c - t[:, :, None] * total[None, :, :]
    num = np.einsum("imk,imk->im", b, b)
    with np.errstate(divide="ignore", invalid="ignore"):
        lm = num / (nobs * t * (1.0 - t))
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
