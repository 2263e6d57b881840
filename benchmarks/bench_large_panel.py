"""A large simulated panel through every analysis step; wall time and peak memory per step.

    python benchmarks/bench_large_panel.py [--quick] [--people N] [--trees T] [--shards K] [--until STEP]

Full size: 100,000 people, 6 waves, three scales (4, 5 and 6 items), 20 wave-1
predictors, a 100-tree forest (goal: under 180 s and 2 GiB in all).
``--quick``: 10,000 people and 10 trees.

Each workflow step is run in this process through its own step function
(``wavetrail.stages``) with a :class:`wavetrail.stages.runner.Job` holding the
same inputs, outputs and config a Snakemake job would pass, so the timings are
those of the library code of each step without the workflow engine around it.
Every step reads its inputs from files, as in a build: the check step reads the
data file and writes the stored panel (``results/checks/panel.parquet``), which
every later step that needs the data reads instead of the data file. Peak memory is ``ru_maxrss`` of this process
(and of children, none here) after each step: it only grows, so the last line is
the peak of the whole run.

The machine is shared while this runs; wall-clock numbers carry that noise.
"""

from __future__ import annotations

import argparse
import os
import resource
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd
import yaml

from wavetrail.stages.runner import Job, job_seed

SEED = 20240611
WAVES = [1, 2, 3, 4, 5, 6]
TIMES = [0.0, 1.0, 2.0, 3.0, 4.0, 5.0]
SCALES = {"mood": 4, "sleep": 5, "stress": 6}
N_NUMERIC, N_CATEGORY = 16, 4


def simulate(n: int, seed: int = SEED) -> tuple[pd.DataFrame, dict]:
    """Long table (one row per person and attended wave) and its codebook mapping."""
    rng = np.random.default_rng(seed)
    num = rng.normal(size=(n, N_NUMERIC)).round(3)
    cat = rng.integers(1, 4, size=(n, N_CATEGORY))
    # growth factors of each scale; x1 moves the slope, category c1 == 3 the intercept
    t = np.asarray(TIMES)
    attend = rng.random((n, len(WAVES))) < np.linspace(1.0, 0.7, len(WAVES))  # attrition
    attend[:, 0] = True
    rows = np.repeat(np.arange(n), len(WAVES))[attend.ravel()]
    wave_of = np.tile(np.arange(len(WAVES)), n)[attend.ravel()]
    cols: dict[str, np.ndarray] = {"pid": rows + 1, "wave": np.asarray(WAVES)[wave_of]}
    for s, k in SCALES.items():
        icpt = 0.6 * rng.normal(size=n) + 0.4 * (cat[:, 0] == 3)
        slope = 0.08 + 0.06 * num[:, 0] + 0.05 * rng.normal(size=n)
        # occasion-specific state on top of the trait trajectory (adjacent waves correlate below 1)
        eta = icpt[rows] + slope[rows] * t[wave_of] + 0.35 * rng.normal(size=len(rows))
        for j in range(k):
            y = 3.0 + (0.7 + 0.05 * j) * eta + 0.6 * rng.normal(size=len(rows))
            y = np.clip(np.round(y), 1, 5)
            reverse = j == k - 1
            if reverse:
                y = 6 - y
            y[rng.random(len(rows)) < 0.02] = np.nan  # item non-response
            cols[f"{s}_{j + 1}"] = y
    first = wave_of == 0
    for j in range(N_NUMERIC):
        cols[f"x{j + 1}"] = np.where(first, num[rows, j], np.nan)
    for j in range(N_CATEGORY):
        cols[f"c{j + 1}"] = np.where(first, cat[rows, j], np.nan)
    long = pd.DataFrame(cols)
    variables = [{"name": "pid", "type": "integer"},
                 {"name": "wave", "type": "integer", "range": [1, len(WAVES)]}]
    for s, k in SCALES.items():
        for j in range(k):
            entry = {"name": f"{s}_{j + 1}", "type": "integer", "range": [1, 5], "scale": s}
            if j == k - 1:
                entry["reverse"] = True
            variables.append(entry)
    for j in range(N_NUMERIC):
        variables.append({"name": f"x{j + 1}", "type": "number", "range": [-10, 10], "waves": [1]})
    for j in range(N_CATEGORY):
        variables.append({"name": f"c{j + 1}", "type": "category", "levels": {1: "low", 2: "mid", 3: "high"},
                          "waves": [1]})
    codebook = {"study": {"id": "pid", "wave": "wave", "waves": WAVES, "time_scores": TIMES},
                "variables": variables,
                "scales": {s: {"min_share": 0.75} for s in SCALES}}
    return long, codebook


def peak_mb() -> float:
    """Peak resident memory so far of this process and its children (MB; Linux reports KB)."""
    own = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
    kids = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss
    return max(own, kids) / 1024


#: the steps in workflow order (``--until`` stops after one of them; later steps read earlier outputs)
STEPS = ("check_data", "score_scales", "assess_reliability", "test_invariance", "fit_growth",
         "grow_forest_shard", "merge_forest", "summarise_forest")


def run(n: int, trees: int, shards: int, workdir: Path, until: str = STEPS[-1]) -> list[tuple[str, float, float]]:
    from wavetrail.stages.checks import check_data
    from wavetrail.stages.forest import grow_forest_shard, merge_forest, summarise_forest
    from wavetrail.stages.growth import fit_growth
    from wavetrail.stages.scores import assess_reliability, score_scales, test_invariance

    rows: list[tuple[str, float, float]] = []

    last = STEPS.index(until)

    def clock(name, f, *a):
        step = name.split(" ")[0]
        if step in STEPS and STEPS.index(step) > last:
            return
        t0 = time.perf_counter()
        f(*a)
        rows.append((name, time.perf_counter() - t0, peak_mb()))
        print(f"  {name:<22} {rows[-1][1]:8.1f} s   peak RSS {rows[-1][2]:7.0f} MB", flush=True)

    def write_inputs():
        long, cb = simulate(n)
        (workdir / "config").mkdir(parents=True, exist_ok=True)
        (workdir / "data").mkdir(exist_ok=True)
        (workdir / "config" / "codebook.yaml").write_text(yaml.safe_dump(cb, sort_keys=False))
        long.to_csv(workdir / "data" / "panel.csv", index=False)
        print(f"  simulated {len(long):,} rows x {long.shape[1]} columns "
              f"({(workdir / 'data' / 'panel.csv').stat().st_size / 2**20:.0f} MB csv)")

    config = {"seed": SEED,
              "growth": {"outcomes": ["sleep"], "shapes": ["linear", "quadratic"], "residuals": "free"},
              "invariance": {"scales": "all"},
              "forest": {"outcome": "sleep", "shape": "linear", "predictors": "wave1",
                         "trees": trees, "shards": shards, "top": 5}}

    def job(step, inp, out, wildcards=None, params=None):
        wildcards = wildcards or {}
        return Job(step=step, project=workdir, input=inp, output=out, config=config,
                   wildcards=wildcards, params=params or {}, seed=job_seed(SEED, step, wildcards))

    data = {"data": ["data/panel.csv"], "codebook": "config/codebook.yaml"}
    stored = {"panel": "results/checks/panel.parquet", "codebook": "config/codebook.yaml"}
    gated = {**stored, "findings": "results/checks/findings.csv"}
    clock("simulate + write csv", write_inputs)
    clock("check_data", check_data, job("check_data", data, {
        "findings": "results/checks/findings.csv", "descriptives": "results/checks/descriptives.csv",
        "attrition": "results/checks/attrition.csv", "panel": "results/checks/panel.parquet"}))
    clock("score_scales", score_scales, job("score_scales", gated, {"scores": "results/scores/scores.csv"}))
    clock("assess_reliability", assess_reliability,
          job("assess_reliability", gated, {"reliability": "results/scores/reliability.csv"}))
    clock("test_invariance", test_invariance,
          job("test_invariance", gated, {"invariance": "results/scores/invariance.csv"}))
    clock("fit_growth", fit_growth, job("fit_growth", {**stored, "scores": "results/scores/scores.csv"},
                                        {"fit": "results/growth/fit.csv", "estimates": "results/growth/est.csv",
                                         "comparison": "results/growth/comparison.csv",
                                         "figure": "results/growth/trajectories.png"}))
    forest_in = {**stored, "scores": "results/scores/scores.csv"}
    for k in range(1, shards + 1):
        clock(f"grow_forest_shard {k}/{shards}", grow_forest_shard,
              job("grow_forest_shard", forest_in, {"shard": f"results/forest/shard-{k}.json"},
                  wildcards={"shard": str(k)}, params={"n_jobs": 1}))
    clock("merge_forest", merge_forest,
          job("merge_forest", {"shards": [f"results/forest/shard-{k}.json" for k in range(1, shards + 1)]},
              {"forest": "results/forest/forest.json"}))
    clock("summarise_forest", summarise_forest,
          job("summarise_forest", {**forest_in, "forest": "results/forest/forest.json"},
              {"importance": "results/forest/importance.csv", "dependence": "results/forest/dependence.csv",
               "interactions": "results/forest/interactions.csv",
               "importance_figure": "results/forest/importance.png",
               "trajectories_figure": "results/forest/trajectories.png"}))
    findings = pd.read_csv(workdir / "results/checks/findings.csv")
    errors = int((findings["severity"] == "error").sum()) if len(findings) else 0
    if until != STEPS[-1]:
        print(f"  check errors {errors}; stopped after {until}")
        return rows
    imp = pd.read_csv(workdir / "results/forest/importance.csv")
    fit = pd.read_csv(workdir / "results/growth/fit.csv")
    print(f"  check errors {errors}; growth converged {fit['converged'].tolist()}; "
          f"forest top 3 {imp['predictor'].head(3).tolist()} (planted: x1 on slope, c1 on intercept)")
    return rows


def main(argv=None) -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="10,000 people and 10 trees")
    ap.add_argument("--people", type=int)
    ap.add_argument("--trees", type=int)
    ap.add_argument("--shards", type=int, default=1)
    ap.add_argument("--no-baseline", action="store_true", help="skip the small same-run baseline")
    ap.add_argument("--until", choices=STEPS, default=STEPS[-1],
                    help="stop after this step (the goals are for every step; for measuring the first ones)")
    a = ap.parse_args(argv)
    n = a.people or (10_000 if a.quick else 100_000)
    trees = a.trees or (10 if a.quick else 100)
    print(f"cores: {os.cpu_count()}, load average {os.getloadavg()[0]:.2f} (shared machine)")
    base_n, base_trees = max(1000, n // 10), max(2, trees // 10)
    results = {}
    sizes = [(n, trees)] if a.no_baseline else [(base_n, base_trees), (n, trees)]
    for size, T in sizes:
        print(f"panel of {size:,} people, {len(WAVES)} waves, {sum(SCALES.values())} items in "
              f"{len(SCALES)} scales, {N_NUMERIC + N_CATEGORY} predictors, {T} trees, {a.shards} shard(s)")
        with tempfile.TemporaryDirectory(prefix="wavetrail-large-") as tmp:
            results[size] = run(size, T, a.shards, Path(tmp), a.until)
    rows = results[n]
    total = sum(r[1] for r in rows if r[0] in STEPS or r[0].split(" ")[0] in STEPS)  # the steps, not the simulation
    peak = max(r[2] for r in rows)
    print(f"total {total:.0f} s (goal 180 s: ratio {total / 180:.2f}); peak RSS {peak:.0f} MB "
          f"(goal 2048 MB: ratio {peak / 2048:.2f})" + ("" if a.until == STEPS[-1] else f" up to {a.until} only"))
    if not a.no_baseline:
        print("per 1,000 people, large vs small run of the same process (1.00 = linear scaling; "
              "forest steps also scale with the tree count):")
        small = dict((r[0], r[1]) for r in results[base_n])
        for name, t, _ in rows:
            if name in small and small[name] > 0:
                ratio = (t / n) / (small[name] / base_n)
                print(f"  {name:<22} {t / n * 1000:8.3f} s vs {small[name] / base_n * 1000:8.3f} s -> {ratio:5.2f}")


if __name__ == "__main__":
    sys.exit(main())
