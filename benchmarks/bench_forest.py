"""Benchmarks of the moderator forest; every figure is printed beside a same-run baseline.

    python benchmarks/bench_forest.py [--quick] [speed] [naive] [recovery] [memory] [demo]

``--quick`` runs every case at reduced sizes (a smoke run of a minute or two);
the goals below refer to the full sizes.

* speed    — 1,000 people, 5 waves, 90 predictors, quadratic growth: 500 trees with
             importance, expected trajectories of the top 10 (goal < 60 s on 2 cores);
* naive    — one cut search by prefix sums + batched fits against refitting every
             candidate child from its raw rows with scipy.optimize (goal >= 100x);
* recovery — the two-step baseline (per-person OLS growth coefficients, then a
             scikit-learn random forest) against the forest on 10 simulated panels with
             four true moderators (one acting only on the spread of the slopes) among
             noise: time and how often they take ranks 1-4, side by side;
* memory   — 100,000 people, 6 waves, 100 trees: peak resident memory (run alone);
* demo     — demo-sized panel (800 people, 5 waves, 36 predictors, quadratic);
* small    — calibration and power of the root split with default settings at 60, 150
             and 1,000 people x 5 waves (linear growth, 8 noise predictors and one binary
             predictor): null root-split rate (goal: within 5 % +- 2.5 SE; 200 panels at
             60 people) and how often a binary slope moderator (+0.6 per wave) is found at
             the root (goal >= 75 % at 60 people), beside asymptotic tests only
             (``mc_below=0``) and the former default node size of 10 per parameter.

The machine is shared while these run; wall-clock numbers carry that noise.
"""

from __future__ import annotations

import os
import resource
import sys
import time

import numpy as np
import pandas as pd

from wavetrail.forest import grow_forest
from wavetrail.forest._simulate import TRUE_MODERATORS, simulate_panel
from wavetrail.forest.models import GrowthNodeModel, PanelTerms
from wavetrail.forest.splitter import best_cut


def _clock(f, *a, **k):
    t0 = time.perf_counter()
    out = f(*a, **k)
    return out, time.perf_counter() - t0


def person_coefficients(wide: pd.DataFrame, times, shape: str) -> np.ndarray:
    """Per-person OLS growth coefficients (NaN where too few waves are observed)."""
    t = np.asarray(times, dtype=float)
    D = np.column_stack([np.ones_like(t), t] + ([t ** 2] if shape == "quadratic" else []))
    Y = wide.to_numpy(dtype=float)
    out = np.full((len(Y), D.shape[1]), np.nan)
    for i, y in enumerate(Y):
        o = ~np.isnan(y)
        if o.sum() > D.shape[1]:
            out[i] = np.linalg.lstsq(D[o], y[o], rcond=None)[0]
    return out


def two_step(wide, X, times, shape, trees=500, seed=0, n_jobs=2):
    """Baseline: OLS coefficients per person -> RandomForestRegressor; ranks by permutation importance."""
    from sklearn.ensemble import RandomForestRegressor
    from sklearn.inspection import permutation_importance

    C = person_coefficients(wide, times, shape)
    ok = ~np.isnan(C).any(axis=1)
    Xn = pd.DataFrame({c: (X[c].cat.codes.replace(-1, np.nan) if isinstance(X[c].dtype, pd.CategoricalDtype)
                           else X[c]).astype(float) for c in X.columns})
    Xn = Xn.fillna(Xn.median())
    C = (C - np.nanmean(C, axis=0)) / np.nanstd(C, axis=0)
    rf = RandomForestRegressor(n_estimators=trees, max_features=1 / 3, min_samples_leaf=5,
                               random_state=seed, n_jobs=n_jobs, oob_score=False)
    rf.fit(Xn[ok], C[ok])
    pi = permutation_importance(rf, Xn[ok], C[ok], n_repeats=3, random_state=seed, n_jobs=n_jobs)
    order = np.argsort(-pi.importances_mean, kind="stable")
    return [Xn.columns[j] for j in order]


def bench_speed(n=1000, waves=5, n_pred=90, trees=500, n_jobs=2):
    wide, X, times = simulate_panel(n, waves, n_noise=n_pred - 4, shape="quadratic", seed=1)
    f, t_grow = _clock(grow_forest, wide, X, times, shape="quadratic", trees=trees, seed=1, n_jobs=n_jobs)
    imp = f.importance()
    t0 = time.perf_counter()
    for name in imp["predictor"][:10]:
        f.dependence(name)
    t_dep = time.perf_counter() - t0
    _, t_h = _clock(f.interactions, top=10)
    total = t_grow + t_dep
    print(f"speed: {n} people, {waves} waves, {n_pred} predictors, quadratic, {trees} trees, n_jobs={n_jobs}")
    print(f"  grow + importance {t_grow:.1f} s, trajectories top 10 {t_dep:.2f} s -> total {total:.1f} s "
          f"(goal 60 s: ratio {total / 60:.2f}); H for 45 pairs {t_h:.1f} s")
    print(f"  mean leaves per tree {np.mean([t.n_leaves_ for t in f.trees_]):.2f}; top 4: "
          f"{list(imp['predictor'][:4])}")
    _, t_base = _clock(two_step, wide, X, times, "quadratic", trees=trees, seed=1, n_jobs=n_jobs)
    print(f"  two-step baseline (OLS -> sklearn forest, {trees} trees + permutation importance) "
          f"{t_base:.1f} s; forest / baseline = {total / t_base:.2f}")
    return total


def _naive_fit(model, Y, start):
    """Maximum likelihood from raw rows with scipy.optimize (the slow way)."""
    from scipy.optimize import minimize

    def nll(th):
        ll = model.loglik(th, Y)
        s = ll.sum()
        return -s if np.isfinite(s) else 1e300

    def grad(th):
        return -model.scores(th, Y).sum(axis=0)

    res = minimize(nll, start, jac=grad, method="BFGS", options={"gtol": 1e-6, "maxiter": 500})
    return res.x, -res.fun


def bench_naive(n=1000, cuts=16):
    wide, X, times = simulate_panel(n, 5, n_noise=4, shape="quadratic", seed=2)
    model = GrowthNodeModel(times, "quadratic")
    Y = wide.to_numpy()
    terms = PanelTerms(Y)
    rows = np.arange(n)
    th0, _, _ = model.fit(terms.group_stats(rows, np.zeros(n, np.int64), 1))
    z = X["step_slope"].to_numpy()
    sp, t_fast = _clock(best_cut, model, terms, rows, z, "numeric", th0[0], min_size=140, max_cuts=cuts)
    order = np.argsort(z, kind="stable")
    pos = np.unique(np.round(np.linspace(140, n - 140, cuts)).astype(int))
    t0 = time.perf_counter()
    best = -np.inf
    best_cut_value = None
    for c in pos:
        lo, hi = order[:c], order[c:]
        _, l1 = _naive_fit(model, Y[lo], th0[0])
        _, l2 = _naive_fit(model, Y[hi], th0[0])
        if l1 + l2 > best:
            best, best_cut_value = l1 + l2, (z[order[c - 1]] + z[order[c]]) / 2
    t_naive = time.perf_counter() - t0
    print(f"naive: {len(pos)} candidate cuts, {n} people, quadratic; prefix sums + batch {t_fast * 1e3:.0f} ms, "
          f"raw rows + scipy BFGS {t_naive:.1f} s -> {t_naive / t_fast:.0f}x (goal 100x); "
          f"cuts {sp.cut:.3f} vs {best_cut_value:.3f}")


def bench_recovery(seeds=10, n=1000, n_noise=30, trees=100, n_jobs=2):
    truth = set(TRUE_MODERATORS)
    hits_f = hits_b = 0
    t_f = t_b = 0.0
    spread_rank_f, spread_rank_b = [], []
    for s in range(seeds):
        wide, X, times = simulate_panel(n, 5, n_noise=n_noise, shape="linear", seed=100 + s)
        f, dt = _clock(grow_forest, wide, X, times, shape="linear", trees=trees, seed=s, n_jobs=n_jobs)
        t_f += dt
        ranked = list(f.importance()["predictor"])
        base, dt = _clock(two_step, wide, X, times, "linear", trees=trees, seed=s, n_jobs=n_jobs)
        t_b += dt
        hits_f += set(ranked[:4]) == truth
        hits_b += set(base[:4]) == truth
        spread_rank_f.append(ranked.index("spread_slope") + 1)
        spread_rank_b.append(base.index("spread_slope") + 1)
    print(f"recovery: {seeds} panels of {n} people, 4 true moderators + {n_noise} noise, "
          f"{trees} trees each, n_jobs={n_jobs}")
    print(f"  forest:            {t_f:7.1f} s; true moderators take ranks 1-4 in {hits_f} of {seeds}; "
          f"spread-only moderator ranks {spread_rank_f}")
    print(f"  two-step baseline: {t_b:7.1f} s; ranks 1-4 in {hits_b} of {seeds}; "
          f"spread-only moderator ranks {spread_rank_b}")
    print(f"  time forest / baseline = {t_f / max(t_b, 1e-9):.2f}")


def bench_memory(n=100_000, waves=6, trees=100, n_pred=20):
    wide, X, times = simulate_panel(n, waves, n_noise=n_pred - 4, shape="linear", seed=3)
    f, t = _clock(grow_forest, wide, X, times, shape="linear", trees=trees, seed=3, n_jobs=1)
    f.dependence(f.importance()["predictor"][0])
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    print(f"memory: {n} people, {waves} waves, {n_pred} predictors, {trees} trees: {t:.0f} s, "
          f"peak RSS {peak:.0f} MB (goal 4096 MB: ratio {peak / 4096:.2f})")


def bench_demo(trees=(100, 200, 300), n_jobs=2):
    wide, X, times = simulate_panel(800, 5, n_noise=32, shape="quadratic", seed=4)
    for T in trees:
        f, t = _clock(grow_forest, wide, X, times, shape="quadratic", trees=T, seed=4, n_jobs=n_jobs,
                      max_depth=3)
        t0 = time.perf_counter()
        for name in f.importance()["predictor"][:10]:
            f.dependence(name)
        f.interactions(top=10)
        t2 = time.perf_counter() - t0
        print(f"demo-sized: {T} trees, n_jobs={n_jobs}: grow {t:.1f} s, summaries {t2:.1f} s; "
              f"top 4 {list(f.importance()['predictor'][:4])}")


def _binary_panel(n, seed, effect):
    rng = np.random.default_rng(seed)
    wide, X, times = simulate_panel(n, 5, n_noise=8, seed=seed, moderators=False)
    g = rng.integers(0, 2, size=n).astype(float)
    wide = wide + effect * g[:, None] * np.asarray(times)[None, :]
    X = X.drop(columns=["lin_intercept", "step_slope", "spread_slope"])
    X["binary"] = g
    return wide, X, times


def bench_small(sizes=((60, 200, 60), (150, 100, 40), (1000, 40, 20))):
    from wavetrail.forest import grow_tree

    variants = {"default": {}, "asymptotic only": {"mc_below": 0}, "10 per parameter": {"min_size": 100}}
    for n, null_reps, power_reps in sizes:
        for label, kw in variants.items():
            t0 = time.perf_counter()
            null = sum(grow_tree(*_binary_panel(n, 1000 + r, 0.0), max_depth=1, seed=r, **kw).n_leaves_ > 1
                       for r in range(null_reps))
            found = 0
            for r in range(power_reps):
                tree = grow_tree(*_binary_panel(n, 50_000 + r, 0.6), max_depth=1, seed=r, **kw)
                found += tree.n_leaves_ > 1 and tree.splits_["predictor"].iloc[0] == "binary"
            rate = null / null_reps
            se = (0.05 * 0.95 / null_reps) ** 0.5
            band = "in" if abs(rate - 0.05) <= 2.5 * se else "OUTSIDE"
            print(f"small: {n:5d} people, {label:16s}: null root splits {null:3d} of {null_reps} ({rate:.3f}, "
                  f"{band} the band 5 % +- 2.5 SE); binary slope moderator at the root {found} of {power_reps} "
                  f"({found / power_reps:.2f}); {time.perf_counter() - t0:.0f} s")


QUICK = {
    "small": dict(sizes=((60, 40, 10), (150, 20, 10))),
    "speed": dict(n=600, n_pred=30, trees=50),
    "naive": dict(n=400, cuts=8),
    "recovery": dict(seeds=2, n=600, n_noise=12, trees=30),
    "memory": dict(n=10_000, trees=10),
    "demo": dict(trees=(30,)),
}


if __name__ == "__main__":
    args = sys.argv[1:]
    quick = "--quick" in args
    which = [a for a in args if a != "--quick"] or ["speed", "naive", "recovery", "demo"]
    print(f"cores: {os.cpu_count()}, load average {os.getloadavg()[0]:.2f} (shared machine)"
          + (" -- QUICK sizes, goals refer to the full sizes" if quick else ""))
    for name in which:
        globals()[f"bench_{name}"](**(QUICK.get(name, {}) if quick else {}))
