"""Batched fitting, sufficient statistics and casewise pieces of the SEM engine."""

import numpy as np
import pytest

from wavetrail.growth import growth_spec
from wavetrail.sem import (SuffStats, casewise_loglik, casewise_scores, fit_batch, information,
                           pattern_index, person_terms, score_outer, split_stats)
from wavetrail.sem.likelihood import evaluate


def simulate(n=400, seed=3, miss=0.2, waves=5):
    """Quadratic growth data with a known truth (fixed seed)."""
    rng = np.random.default_rng(seed)
    t = np.arange(float(waves))
    L = np.c_[np.ones(waves), t, t ** 2]
    eta = rng.multivariate_normal([2.0, 0.5, -0.05], [[1.0, 0.1, 0.0], [0.1, 0.2, 0.0], [0.0, 0.0, 0.01]], n)
    Y = eta @ L.T + rng.normal(0, 0.5, (n, waves))
    Y[rng.random((n, waves)) < miss] = np.nan
    return t, Y


def test_suffstats_from_data_matches_direct_sums():
    _, Y = simulate(60)
    st = SuffStats.from_data(Y)
    masks, idx = pattern_index(Y)
    assert st.masks.shape == masks.shape and st.n.shape == (1, len(masks))
    assert st.n.sum() == (~np.isnan(Y)).any(axis=1).sum()
    for j, m in enumerate(masks):
        rows = Y[idx == j]
        x = np.where(np.isnan(rows), 0.0, rows)
        np.testing.assert_allclose(st.sums[0, j], x.sum(0))
        np.testing.assert_allclose(st.cross[0, j], x.T @ x)
        assert np.all(st.cross[0, j][~m] == 0)


def test_split_stats_equal_group_sums():
    _, Y = simulate(120)
    masks, idx = pattern_index(Y)
    idx, x, xx = person_terms(Y, masks, idx)
    z = np.random.default_rng(0).normal(size=len(Y))
    order = np.argsort(z)
    cuts = np.array([10, 57, 110])
    left, right = split_stats(masks, idx, x, xx, order, cuts)
    for c, cut in enumerate(cuts):
        g = np.full(len(Y), 1)
        g[order[:cut]] = 0
        ref = SuffStats.from_groups(masks, idx, x, xx, g, 2)
        np.testing.assert_allclose(left.n[c], ref.n[0])
        np.testing.assert_allclose(right.cross[c], ref.cross[1], atol=1e-9)
        np.testing.assert_allclose(left.sums[c], ref.sums[0], atol=1e-9)


def test_gradient_and_casewise_scores_match_finite_differences():
    t, Y = simulate(150)
    spec = growth_spec(t, "quadratic", "free")
    st = SuffStats.from_data(Y)
    cm = spec.compile()
    th = spec.start(st)[0] * 1.05
    ll, g, _ = evaluate(cm, th[None], st)
    h = 1e-6
    num = np.array([(evaluate(cm, (th + h * e)[None], st, grad=False, info=False)[0]
                     - evaluate(cm, (th - h * e)[None], st, grad=False, info=False)[0]) / (2 * h)
                    for e in np.eye(cm.k)])
    np.testing.assert_allclose(g[0], num, rtol=1e-5, atol=1e-4)
    sc = casewise_scores(spec, th, Y)
    np.testing.assert_allclose(sc.sum(0), g[0], rtol=1e-8, atol=1e-8)
    np.testing.assert_allclose(casewise_loglik(spec, th, Y).sum(), ll[0], rtol=1e-12)


def test_scores_sum_to_zero_at_estimate_and_information_matches_outer_product():
    t, Y = simulate(3000, seed=11)
    spec = growth_spec(t, "linear", "equal")
    st = SuffStats.from_data(Y)
    bf = fit_batch(spec, st)
    assert bf.converged[0]
    sc = casewise_scores(spec, bf.theta[0], Y)
    g = sc.sum(0)
    # at the estimate the summed scores vanish up to the convergence tolerance:
    # the scoring decrement g' I^-1 g is below fit_batch's tol (1e-9)
    I1 = information(spec, bf.theta[0], SuffStats.from_data(Y))
    assert g @ np.linalg.solve(I1, g) < 1e-8
    assert np.abs(g).max() < 1e-3 * np.abs(sc).sum(0).max() / len(Y) * 10
    # misspecified (quadratic truth, linear model): still, information and the outer
    # product agree in order of magnitude; with the right model they agree closely
    spec_q = growth_spec(t, "quadratic", "free")
    bq = fit_batch(spec_q, st)
    sq = casewise_scores(spec_q, bq.theta[0], Y)
    I = information(spec_q, bq.theta[0], st)
    O = score_outer(sq)
    ratio = np.diag(O) / np.diag(I)
    assert np.all((ratio > 0.8) & (ratio < 1.25)), ratio


def test_batch_equals_one_by_one():
    t, Y = simulate(500, seed=5)
    spec = growth_spec(t, "quadratic", "free")
    masks, idx = pattern_index(Y)
    idx, x, xx = person_terms(Y, masks, idx)
    order = np.argsort(np.random.default_rng(2).normal(size=len(Y)))
    left, right = split_stats(masks, idx, x, xx, order, np.array([100, 250, 400]))
    both = SuffStats.stack([left, right])
    parent = fit_batch(spec, SuffStats.from_data(Y))
    bb = fit_batch(spec, both, start=parent.theta[0])
    assert bb.converged.all()
    for b in range(both.B):
        one = fit_batch(spec, both.take([b]))  # cold start: same optimum
        assert one.loglik[0] == pytest.approx(bb.loglik[b], abs=1e-7)
        np.testing.assert_allclose(one.theta[0], bb.theta[b], rtol=1e-4, atol=1e-5)


def test_recovers_known_truth():
    t, Y = simulate(20000, seed=8, miss=0.3)
    spec = growth_spec(t, "quadratic", "free")
    bf = fit_batch(spec, SuffStats.from_data(Y))
    est = dict(zip(spec.param_names, bf.theta[0]))
    assert est["mean(intercept)"] == pytest.approx(2.0, abs=0.03)
    assert est["mean(slope)"] == pytest.approx(0.5, abs=0.02)
    assert est["mean(quadratic)"] == pytest.approx(-0.05, abs=0.005)
    assert est["var(slope)"] == pytest.approx(0.2, abs=0.03)
    assert est["var(y3)"] == pytest.approx(0.25, abs=0.02)


def test_implied_moments():
    spec = growth_spec([0, 1, 3], "linear", "equal")
    th = np.array([0.5, 1.0, 2.0, 0.3, 0.5, 0.2])
    names = spec.param_names
    assert names == ["resvar", "mean(intercept)", "var(intercept)", "cov(intercept,slope)", "mean(slope)",
                     "var(slope)"]
    mu, S = spec.implied(th)
    L = np.c_[np.ones(3), [0, 1, 3]]
    np.testing.assert_allclose(mu, L @ [1.0, 0.5])
    np.testing.assert_allclose(S, L @ [[2.0, 0.3], [0.3, 0.2]] @ L.T + 0.5 * np.eye(3))


def test_latent_regression_implied_mean_and_gradient_agree():
    # mu = nu + Lambda (I - B)^-1 alpha, Sigma = Lambda A Psi A^T Lambda^T + Theta, written out
    # by hand here; and the analytic gradient equals central differences of the log-likelihood
    # (both fail if the mean formula and its derivatives disagree).
    rng = np.random.default_rng(5)
    n = 300
    x = rng.normal(12.0, 2.0, n)  # a covariate far from zero
    t = np.arange(4.0)
    eta0 = 1.0 + 0.3 * x + rng.normal(0, 1, n)
    eta1 = 0.5 - 0.04 * x + rng.normal(0, 0.3, n)
    Y = np.c_[eta0[:, None] + eta1[:, None] * t + rng.normal(0, 0.5, (n, 4)), x]
    Y[:, :4][rng.random((n, 4)) < 0.15] = np.nan  # missing waves; the covariate is complete
    spec = growth_spec(t, "linear", "free", covariates=["x"])
    cm = spec.compile()
    st = SuffStats.from_data(Y)
    th = spec.start(st)[0]
    th = th + 0.05 * rng.normal(size=len(th)) * np.maximum(np.abs(th), 0.1)
    mats = cm.matrices(th[None])
    from wavetrail.sem.spec import ALPHA, BETA, LAMBDA, NU, PSI, THETA

    A = np.linalg.inv(np.eye(spec.m) - mats[BETA][0])
    mu_hand = mats[NU][0] + mats[LAMBDA][0] @ A @ mats[ALPHA][0]
    sig_hand = mats[LAMBDA][0] @ A @ mats[PSI][0] @ A.T @ mats[LAMBDA][0].T + mats[THETA][0]
    mu, sig = spec.implied(th)
    np.testing.assert_allclose(mu, mu_hand, rtol=1e-12)
    np.testing.assert_allclose(sig, sig_hand, rtol=1e-12)
    ll, g, _ = evaluate(cm, th[None], st)
    h = 1e-6 * np.maximum(np.abs(th), 1.0)
    num = np.array([(evaluate(cm, (th + hi * e)[None], st, grad=False, info=False)[0]
                     - evaluate(cm, (th - hi * e)[None], st, grad=False, info=False)[0]) / (2 * hi)
                    for hi, e in zip(h, np.eye(cm.k))])
    np.testing.assert_allclose(g[0], num, rtol=1e-5, atol=1e-3)
