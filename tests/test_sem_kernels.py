"""Numerical kernels of the SEM engine against numpy/LAPACK and against EM.

* the element-wise batched Cholesky inverse used for small matrices equals
  ``numpy.linalg.inv`` / ``slogdet`` and flags matrices that are not positive definite;
* evaluating all missingness patterns at once (masked p x p moments) equals the
  likelihood computed pattern by pattern with ``numpy.linalg`` on the observed block;
* the saturated model by Fisher scoring and by EM with SQUAREM extrapolation (Varadhan &
  Roland 2008, Scandinavian Journal of Statistics 35(2)) reaches the plain EM maximum
  (Dempster, Laird & Rubin 1977, JRSS B 39(1)) — the same estimates, a log-likelihood no
  lower — and a saturated model without a maximum is refused at once with the reason.
"""

import numpy as np
import pytest

from wavetrail.growth import growth_spec
from wavetrail.sem import SuffStats
from wavetrail.sem import pattern_index as lik_pattern_index
from wavetrail.sem import likelihood as lik
from wavetrail.sem import saturated as sat
from wavetrail.sem.optimise import start_values


def _panel(n=400, waves=5, miss=0.25, seed=3):
    rng = np.random.default_rng(seed)
    t = np.arange(float(waves))
    eta = rng.multivariate_normal([2.0, 0.4], [[0.8, 0.05], [0.05, 0.1]], n)
    Y = eta[:, :1] + eta[:, 1:] * t + rng.normal(0, 0.5, (n, waves))
    Y[rng.random(Y.shape) < miss] = np.nan
    Y = Y[~np.isnan(Y).all(axis=1)]
    return t, Y


def test_small_spd_inverse_equals_lapack_and_flags_indefinite():
    rng = np.random.default_rng(0)
    X = rng.normal(size=(200, 6, 9))
    S = X @ np.swapaxes(X, -1, -2) / 9
    S[7] = np.diag([1.0, 2.0, -1.0, 1.0, 1.0, 1.0])
    S[8] = np.ones((6, 6))
    logdet, W, ok = lik._spd_small(S)
    good = np.delete(np.arange(200), [7, 8])
    assert not ok[7] and not ok[8] and ok[good].all()
    assert np.isfinite(W).all()
    np.testing.assert_allclose(W[good], np.linalg.inv(S[good]), rtol=1e-9, atol=1e-10)
    np.testing.assert_allclose(logdet[good], np.linalg.slogdet(S[good])[1], rtol=0, atol=1e-10)


@pytest.mark.parametrize("n", [5, 40, 200])
def test_small_batches_by_lapack_equal_the_loops_with_the_same_flags(n):
    # below LOOPS_PER_ENTRY * q^2 matrices the factorisation goes through LAPACK (faster for few
    # matrices); it must give the loops' numbers and flag the same matrices, singular ones included
    rng = np.random.default_rng(1)
    X = rng.normal(size=(n, 6, 9))
    S = X @ np.swapaxes(X, -1, -2) / 9
    S[1] = np.diag([1.0, 2.0, -1.0, 1.0, 1.0, 1.0])  # indefinite
    S[2] = np.ones((6, 6))  # singular
    S[3] = S[0].copy()
    S[3][:, 5] = S[3][5, :] = S[3][4] * 1.0  # last row a copy of the one before: singular up to rounding
    S[3][5, 5] = S[3][4, 4]
    ld_a, W_a, ok_a = lik._spd_small(S)
    ld_b, W_b, ok_b = lik._spd_small_lapack(S)
    assert (ok_a == ok_b).all() and not ok_b[[1, 2, 3]].any() and ok_b[[0, 4]].all()
    np.testing.assert_allclose(W_b[ok_b], W_a[ok_a], rtol=1e-9, atol=1e-10)
    np.testing.assert_allclose(ld_b[ok_b], ld_a[ok_a], rtol=0, atol=1e-10)
    assert np.isfinite(W_b).all() and np.isfinite(ld_b).all()


def test_all_patterns_at_once_equal_pattern_by_pattern():
    t, Y = _panel()
    spec = growth_spec(t, "linear", "free")
    cm = spec.compile()
    stats = SuffStats.from_data(Y)
    theta = start_values(spec, stats)[0]
    mu, sigma = spec.implied(theta)
    direct = 0.0
    for row in Y:
        o = ~np.isnan(row)
        r = row[o] - mu[o]
        So = sigma[np.ix_(o, o)]
        direct += -0.5 * (o.sum() * np.log(2 * np.pi) + np.linalg.slogdet(So)[1] + r @ np.linalg.solve(So, r))
    ll = lik.evaluate(cm, theta[None], stats, grad=False, info=False)[0]
    assert ll == pytest.approx(direct, rel=1e-12)
    # and in blocks of patterns (the memory bound for large batches)
    old = lik.BLOCK_ELEMENTS
    try:
        lik.BLOCK_ELEMENTS = 1
        ll_blocks, g_blocks, _ = lik.evaluate(cm, theta[None], stats)
    finally:
        lik.BLOCK_ELEMENTS = old
    ll_all, g_all, _ = lik.evaluate(cm, theta[None], stats)
    assert ll_blocks[0] == pytest.approx(ll_all[0], rel=1e-13)
    np.testing.assert_allclose(g_blocks, g_all, rtol=1e-10, atol=1e-8)


def _plain_em(stats, tol=1e-13, max_iter=20000):
    """Unaccelerated EM (Dempster, Laird & Rubin 1977) to a tight relative tolerance."""
    mean, cov, _ = stats.pairwise_moments()
    mu, sigma = mean[0].copy(), cov[0].copy()
    N = stats.n[0].sum()
    ll_old = sat._loglik(stats, mu, sigma)
    for it in range(1, max_iter + 1):
        mu, sigma = sat._em_step(stats, 0, mu, sigma, N)
        ll = sat._loglik(stats, mu, sigma)
        if abs(ll - ll_old) < tol * abs(ll):
            return mu, sigma, ll, it
        ll_old = ll
    raise AssertionError("plain EM did not converge")


def test_saturated_by_scoring_and_by_squarem_reach_the_em_maximum(monkeypatch):
    _, Y = _panel(seed=11, miss=0.5)  # half the values missing: plain EM needs about 90 steps
    stats = SuffStats.from_data(Y)
    mu_p, sig_p, ll_p, it_p = _plain_em(stats)
    mu_s, sig_s, ll_s, it_s, ok_s = sat.saturated(stats)
    monkeypatch.setattr(sat, "MOMENT_PATH_MAX_P", 0)  # EM with SQUAREM only
    mu_e, sig_e, ll_e, it_e, ok_e = sat.saturated(stats)
    assert ok_s and ok_e
    assert it_e < it_p / 2  # the extrapolation saves most EM steps
    assert ll_s >= ll_p - 1e-12 * abs(ll_p) and ll_e >= ll_p - 1e-10 * abs(ll_p)
    for mu, sig in ((mu_s, sig_s), (mu_e, sig_e)):
        np.testing.assert_allclose(mu, mu_p, atol=1e-5)
        np.testing.assert_allclose(sig, sig_p, atol=1e-5)


def test_saturated_without_a_maximum_is_refused_at_once():
    # 18 people x 10 waves with a fifth of the values deleted (the size of lme4's sleepstudy):
    # fewer than 11 people observe every wave, so the covariance can collapse along a plane
    # through their values and the saturated likelihood grows without bound
    _, Y = _panel(n=18, waves=10, miss=0.2, seed=4)
    stats = SuffStats.from_data(Y)
    assert stats.masks.all(axis=1).any()
    r = sat.saturated(stats)
    assert np.isnan(r[2]) and not r[4] and r[3] == 0
    assert "no maximum" in r.note and "people observe" in r.note
    # the same panel with 400 people has a maximum, found by both paths
    _, Y = _panel(n=400, waves=10, miss=0.2, seed=4)
    assert sat.missing_maximum(SuffStats.from_data(Y)) == ""


def test_growth_fit_says_why_chi_square_is_not_available():
    from wavetrail.growth import fit_growth

    t, Y = _panel(n=18, waves=10, miss=0.2, seed=4)
    g = fit_growth(Y, t, shape="linear", residuals="equal")
    assert np.isfinite(g.fit["loglik"]) and np.isnan(g.fit["chisq"]) and np.isnan(g.fit["cfi"])
    assert "saturated model's likelihood has no maximum" in g.fit["note"]
    assert "chi-square and the fit indices built on it are not available" in g.fit["note"]


@pytest.mark.parametrize("shape, residuals", [("quadratic", "free"), ("linear", "equal"), ("basis", "free")])
def test_pattern_size_groups_equal_the_single_masked_pass(shape, residuals, monkeypatch):
    """Large batches go through the patterns grouped by observed size, small ones through
    one masked pass: the log-likelihood, gradient and information must not depend on which
    (latent-basis loadings exercise the parameter-dependent derivative maps)."""
    from wavetrail.sem import person_terms, split_stats

    t, Y = _panel(n=500, miss=0.3, seed=5)
    spec = growth_spec(t, shape, residuals)
    cm = spec.compile()
    masks, idx = lik_pattern_index(Y)
    idx, x, xx = person_terms(Y, masks, idx)
    rng = np.random.default_rng(1)
    left, right = split_stats(masks, idx, x, xx, rng.permutation(len(Y)), np.arange(60, 440, 10))
    stats = SuffStats.stack([left, right])
    theta = start_values(spec, stats) * (1.0 + 0.05 * rng.normal(size=(stats.B, cm.k)))
    monkeypatch.setattr(lik, "COMPACT_MIN_CELLS", 0)
    monkeypatch.setattr(lik, "MODEL_CHUNK_CELLS", 10 ** 9)
    ll_c, g_c, I_c = lik.evaluate(cm, theta, stats)
    ll_only = lik.evaluate(cm, theta, stats, grad=False, info=False)
    monkeypatch.setattr(lik, "MODEL_CHUNK_CELLS", 100)  # and in slices of a few models
    ll_s, g_s, I_s = lik.evaluate(cm, theta, stats)
    monkeypatch.setattr(lik, "MODEL_CHUNK_CELLS", 10 ** 9)
    monkeypatch.setattr(lik, "COMPACT_MIN_CELLS", 10 ** 9)
    ll_m, g_m, I_m = lik.evaluate(cm, theta, stats)
    np.testing.assert_allclose(ll_s, ll_c, rtol=1e-13)  # BLAS may sum in another order per slice size
    np.testing.assert_allclose(g_s, g_c, rtol=1e-11, atol=1e-10 * np.abs(g_c).max())
    np.testing.assert_allclose(I_s, I_c, rtol=1e-11, atol=1e-13 * np.abs(I_c).max())  # summation order
    assert np.isfinite(ll_m).all()
    np.testing.assert_allclose(ll_c, ll_m, rtol=1e-12)
    np.testing.assert_allclose(ll_only, ll_m, rtol=1e-12)
    np.testing.assert_allclose(g_c, g_m, rtol=1e-9, atol=1e-8 * np.abs(g_m).max())
    np.testing.assert_allclose(I_c, I_m, rtol=1e-9, atol=1e-10 * np.abs(I_m).max())
    # and the gradient is the derivative of the log-likelihood (central differences)
    b, h = 3, 1e-6
    num = [(lik.evaluate(cm, theta[b] + h * e, stats.take([b]), grad=False, info=False)[0]
            - lik.evaluate(cm, theta[b] - h * e, stats.take([b]), grad=False, info=False)[0]) / (2 * h)
           for e in np.eye(cm.k)]
    np.testing.assert_allclose(g_c[b], num, rtol=1e-5, atol=1e-4)


def test_statistics_by_sorted_segments_equal_the_per_person_sums():
    """SuffStats.from_data sums rows segment by segment after sorting by pattern; it must equal
    the per-person route (x x^T for every row, added per pattern) that the tree splits use."""
    from wavetrail.sem import person_terms

    rng = np.random.default_rng(4)
    Y = rng.normal(size=(3000, 12))
    Y[rng.random(Y.shape) < 0.15] = np.nan
    Y[:5] = np.nan  # rows with nothing observed are left out
    a = SuffStats.from_data(Y)
    masks, idx = lik_pattern_index(Y)
    _, x, xx = person_terms(Y, masks, idx)
    b = SuffStats.from_groups(masks, idx, x, xx, np.zeros(len(idx), dtype=int), 1)
    assert np.array_equal(a.masks, b.masks) and np.array_equal(a.n, b.n)
    assert a.total[0] == 2995
    np.testing.assert_allclose(a.sums, b.sums, rtol=1e-12, atol=1e-10)
    np.testing.assert_allclose(a.cross, b.cross, rtol=1e-12, atol=1e-9)
    # the patterns in np.unique(axis=0) order, every row's pattern index pointing at its own mask
    obs = ~np.isnan(Y)
    ref = np.unique(obs[obs.any(axis=1)], axis=0)
    assert np.array_equal(masks, ref)
    assert (masks[idx[5:]] == obs[5:]).all()


def test_information_over_moments_equals_entry_pairs_beyond_twelve_variables(monkeypatch):
    """Above MOMENT_PATH_MAX_P variables, many patterns switch the information to the
    saturated-moment accumulation; it must equal the entry-pair accumulation (a longitudinal
    factor model with free loadings: 3 items x 6 waves = 18 variables, item non-response)."""
    from wavetrail.invariance import invariance_spec

    rng = np.random.default_rng(11)
    n, items, waves = 600, 3, 6
    eta = rng.normal(size=(n, waves)) + rng.normal(size=(n, 1))
    Y = np.concatenate([(0.8 + 0.1 * j) * eta + rng.normal(0, 0.6, (n, waves)) for j in range(items)], axis=1)
    Y = Y.reshape(n, items, waves).transpose(0, 2, 1).reshape(n, waves * items)  # wave-major, as the spec
    Y[rng.random(Y.shape) < 0.15] = np.nan
    spec = invariance_spec([f"i{j}" for j in range(items)], waves, "metric")
    cm = spec.compile()
    stats = SuffStats.from_data(Y)
    assert stats.P > 50 and stats.p == 18
    theta = start_values(spec, stats) * (1.0 + 0.05 * rng.normal(size=(1, cm.k)))
    monkeypatch.setattr(lik, "MOMENT_PATH_MIN_CELLS", 10 ** 9)
    ll_e, g_e, I_e = lik.evaluate(cm, theta, stats)
    monkeypatch.setattr(lik, "MOMENT_PATH_MIN_CELLS", 0)
    ll_m, g_m, I_m = lik.evaluate(cm, theta, stats)
    assert np.isfinite(ll_e).all()
    np.testing.assert_allclose(ll_m, ll_e, rtol=1e-12)
    np.testing.assert_allclose(g_m, g_e, rtol=1e-9, atol=1e-9 * np.abs(g_e).max())
    np.testing.assert_allclose(I_m, I_e, rtol=1e-9, atol=1e-11 * np.abs(I_e).max())  # summation order


def _em_step_by_pattern(stats, mu, sigma):
    """One EM update written pattern by pattern: regression of the missing on the observed
    entries (Little & Rubin 2019, Statistical Analysis with Missing Data, 3rd ed., ch. 11)."""
    p = stats.p
    T1, T2 = np.zeros(p), np.zeros((p, p))
    for j, mask in enumerate(stats.masks):
        n = stats.n[0, j]
        o, u = np.nonzero(mask)[0], np.nonzero(~mask)[0]
        s, C = stats.sums[0, j], stats.cross[0, j]
        x_hat_sum = s.copy()
        Ex = np.zeros((p, p))
        Ex[np.ix_(o, o)] = C[np.ix_(o, o)]
        if len(u):
            B = np.linalg.solve(sigma[np.ix_(o, o)], sigma[np.ix_(o, u)]).T
            c = mu[u] - B @ mu[o]
            R = sigma[np.ix_(u, u)] - B @ sigma[np.ix_(o, u)]
            x_hat_sum[u] = n * c + B @ s[o]
            Ex[np.ix_(u, o)] = np.outer(c, s[o]) + B @ C[np.ix_(o, o)]
            Ex[np.ix_(o, u)] = Ex[np.ix_(u, o)].T
            Ex[np.ix_(u, u)] = (n * R + n * np.outer(c, c) + np.outer(c, B @ s[o]) + np.outer(B @ s[o], c)
                                + B @ C[np.ix_(o, o)] @ B.T)
        T1 += x_hat_sum
        T2 += Ex
    N = stats.n[0].sum()
    m = T1 / N
    return m, T2 / N - np.outer(m, m)


def _loglik_by_pattern(stats, mu, sigma):
    ll = 0.0
    for j, mask in enumerate(stats.masks):
        o = np.nonzero(mask)[0]
        n, s, C = stats.n[0, j], stats.sums[0, j, o], stats.cross[0, j][np.ix_(o, o)]
        S, m = sigma[np.ix_(o, o)], mu[o]
        Sc = C - np.outer(s, m) - np.outer(m, s) + n * np.outer(m, m)
        ll += -0.5 * (n * len(o) * np.log(2 * np.pi) + n * np.linalg.slogdet(S)[1] + np.trace(np.linalg.solve(S, Sc)))
    return ll


def test_batched_em_step_equals_the_pattern_by_pattern_update():
    """The EM step and log-likelihood batched over patterns of equal observed size (a large
    panel has thousands of patterns) equal the update written pattern by pattern."""
    _, Y = _panel(n=600, waves=7, miss=0.3, seed=21)
    stats = SuffStats.from_data(Y)
    assert len(np.unique(stats.masks.sum(axis=1))) >= 5 and stats.masks.all(axis=1).any()
    mean, cov, _ = stats.pairwise_moments()
    mu, sigma = mean[0], cov[0] + 0.1 * np.eye(stats.p)
    for _ in range(3):  # a few steps, so the comparison is not only at the start
        mu_b, sig_b = sat._em_step(stats, 0, mu, sigma, stats.n[0].sum())
        mu_r, sig_r = _em_step_by_pattern(stats, mu, sigma)
        np.testing.assert_allclose(mu_b, mu_r, rtol=1e-12, atol=1e-12)
        np.testing.assert_allclose(sig_b, 0.5 * (sig_r + sig_r.T), rtol=1e-11, atol=1e-12)
        assert sat._loglik(stats, mu_b, sig_b) == pytest.approx(_loglik_by_pattern(stats, mu_b, sig_b), rel=1e-12)
        mu, sigma = mu_b, sig_b


def test_regular_complete_cases_answer_the_maximum_check_at_once(monkeypatch):
    # with people who answer everything and a regular covariance among them, no pattern can
    # lack a maximum; the same answer as the pattern-by-pattern search
    _, Y = _panel(n=400, waves=10, miss=0.1, seed=8)
    stats = SuffStats.from_data(Y)
    assert sat._complete_cases_regular(stats)
    with monkeypatch.context() as m:  # the search agrees
        m.setattr(sat, "_complete_cases_regular", lambda *a: False)
        assert sat.missing_maximum(stats) == ""
    # a panel where nobody answers every wave takes the search
    _, Y2 = _panel(n=400, waves=10, miss=0.1, seed=8)
    Y2[np.isfinite(Y2).all(axis=1), 0] = np.nan
    assert not sat._complete_cases_regular(SuffStats.from_data(Y2))
    assert sat.missing_maximum(SuffStats.from_data(Y2)) == ""
