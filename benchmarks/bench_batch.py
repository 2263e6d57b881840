"""Batched vs one-by-one fitting of the child models of many candidate splits.

A forest node scores every candidate cut by fitting the growth model to both children.
This benchmark builds 2,000 candidate cut pairs (4,000 child models) of a quadratic
growth model (1,000 people, 5 waves, 20% of waves missing; simulated with a fixed
seed) from prefix sums of sufficient statistics, and fits them

* batched: one ``fit_batch`` call over all 4,000 stacked samples, warm-started at the
  parent's estimate (what the forest does);
* one by one: the same ``fit_batch`` code path called once per child model, with the
  same warm start (the Python overhead is paid per model instead of per iteration).

The batched time is the median of three runs; the one-by-one time is one pass over
the 4,000 fits, in thirds run between the batched runs (so that both see the same
drift in the speed of a shared machine).

It prints both times, the ratio (goal >= 20) and the largest difference between the two
sets of log-likelihoods and estimates. ``--quick`` fits 200 pairs.

    python benchmarks/bench_batch.py [--quick]
"""

from __future__ import annotations

import sys
import time

import numpy as np

from wavetrail.growth import growth_spec
from wavetrail.sem import SuffStats, fit_batch, pattern_index, person_terms, split_stats

from _panels import simulate


def candidate_children(Y, pairs, seed=7):
    """Left and right statistics of ``pairs`` cuts over several random predictor orders."""
    rng = np.random.default_rng(seed)
    masks, idx = pattern_index(Y)
    idx, x, xx = person_terms(Y, masks, idx)
    n = len(Y)
    lefts, rights = [], []
    per_order = 100
    for start in range(0, pairs, per_order):
        order = np.argsort(rng.normal(size=n), kind="stable")
        cuts = np.linspace(n * 0.1, n * 0.9, min(per_order, pairs - start)).astype(int)
        left, right = split_stats(masks, idx, x, xx, order, cuts)
        lefts.append(left)
        rights.append(right)
    return SuffStats.stack(lefts + rights)


def main(quick=False):
    pairs = 200 if quick else 2000
    t, Y = simulate()
    spec = growth_spec(t, "quadratic", "free")
    parent = fit_batch(spec, SuffStats.from_data(Y))
    children = candidate_children(Y, pairs)
    warm = parent.theta[0]
    print(f"quadratic growth, {len(Y)} people, {len(t)} waves, 20% missing; "
          f"{pairs} cut pairs = {children.B} child models over {children.P} missingness patterns")

    # batched runs and thirds of the one-by-one loop alternate, so that both are measured
    # over the same minutes (the speed of a shared machine drifts)
    single_ll = np.empty(children.B)
    single_theta = np.empty((children.B, spec.compile().k))
    single_ok = np.empty(children.B, dtype=bool)
    runs, t_single = [], 0.0
    for part in np.array_split(np.arange(children.B), 3):
        t0 = time.perf_counter()
        batched = fit_batch(spec, children, start=warm)
        runs.append(time.perf_counter() - t0)
        t0 = time.perf_counter()
        for b in part:
            one = fit_batch(spec, children.take([b]), start=warm)
            single_ll[b], single_theta[b], single_ok[b] = one.loglik[0], one.theta[0], one.converged[0]
        t_single += time.perf_counter() - t0
    t_batch = float(np.median(runs))

    d_ll = float(np.max(np.abs(single_ll - batched.loglik)))
    d_theta = float(np.max(np.abs(single_theta - batched.theta)))
    print(f"batched:    {t_batch:8.2f} s  ({batched.converged.sum()} of {children.B} converged; "
          f"median of {', '.join(f'{r:.2f}' for r in runs)} s)")
    print(f"one by one: {t_single:8.2f} s  ({single_ok.sum()} of {children.B} converged)")
    print(f"largest difference: log-likelihood {d_ll:.2e}, estimate {d_theta:.2e}")
    print(f"RATIO batched_vs_one_by_one = {t_single / t_batch:.1f}x (goal >= 20)")
    if quick:
        print("QUICK size: the goal refers to 2,000 pairs")


if __name__ == "__main__":
    main(quick="--quick" in sys.argv[1:])
