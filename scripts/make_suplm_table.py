"""Simulate the null distribution of the trimmed supLM statistic and write its table.

Run from the repository root::

    python scripts/make_suplm_table.py

It writes ``wavetrail/forest/_supLM_table.py``. The limiting process of the
score-based supLM statistic with ``k`` parameters is

    sup_{t in [trim, 1 - trim]} ||B_k(t)||^2 / (t (1 - t)),

where ``B_k`` is a ``k``-dimensional standard Brownian bridge. We discretise the
bridge on ``STEPS`` equal steps, draw ``REPS`` paths with a fixed seed and keep,
for every trimming in ``TRIMS`` and every ``k`` in ``1..K_MAX``, the quantiles at
the upper-tail probabilities ``TAIL``. All ``k`` and trims share the same draws
(the first ``k`` coordinates of one ``K_MAX``-dimensional bridge), which keeps the
table monotone in ``k`` and in the trimming.

Why several trims: a node's smallest child size usually narrows the range of
cut points beyond the 10 % trim. The law of the sup over ``[a, b]`` depends on
the range only through ``lambda = b (1 - a) / (a (1 - b))`` (in log-odds time the
normalised bridge is stationary), so a table over symmetric trims covers every
range by interpolation in ``log(lambda)``.
The seed, sizes and the numpy version are written into the table's header.
"""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np

SEED = 20261202
REPS = 40_000
STEPS = 1_000
K_MAX = 30
TRIMS = [0.10, 0.15, 0.20, 0.25, 0.30, 0.35, 0.40, 0.45]
CHUNK = 250
TAIL = [
    0.99, 0.975, 0.95, 0.9, 0.8, 0.7, 0.6, 0.5, 0.4, 0.3, 0.25, 0.2, 0.15, 0.1,
    0.075, 0.05, 0.04, 0.03, 0.025, 0.02, 0.015, 0.01, 0.0075, 0.005, 0.004,
    0.003, 0.002, 0.0015, 0.001, 0.0005,
]


def simulate(reps: int = REPS, steps: int = STEPS, k_max: int = K_MAX, trims=TRIMS,
             seed: int = SEED, chunk: int = CHUNK) -> np.ndarray:
    """Return an array (reps, len(trims), k_max) of simulated supLM values."""
    rng = np.random.default_rng(seed)
    t = np.arange(1, steps + 1) / steps
    lo = min(trims)
    keep = (t >= lo - 1e-12) & (t <= 1 - lo + 1e-12)
    tk = t[keep]
    denom = (tk * (1 - tk))[None, :, None]
    inside = [(tk >= tr - 1e-12) & (tk <= 1 - tr + 1e-12) for tr in trims]
    out = np.empty((reps, len(trims), k_max))
    done = 0
    while done < reps:
        m = min(chunk, reps - done)
        steps_ = rng.standard_normal((m, steps, k_max)) / np.sqrt(steps)
        walk = np.cumsum(steps_, axis=1)
        bridge = walk[:, keep, :] - tk[None, :, None] * walk[:, -1:, :]
        lm = np.cumsum(bridge * bridge, axis=2) / denom
        for j, mask in enumerate(inside):
            out[done:done + m, j] = lm[:, mask].max(axis=1)
        done += m
    return out


def main(target: str = "wavetrail/forest/_supLM_table.py") -> None:
    sims = simulate()
    probs = np.asarray(TAIL)
    quant = np.quantile(sims, 1 - probs, axis=0)  # (len(TAIL), len(TRIMS), k_max)
    lines = [
        '"""Null quantiles of the trimmed supLM statistic (generated; do not edit).',
        "",
        "Written by scripts/make_suplm_table.py: a fixed-seed simulation of the",
        "k-dimensional Brownian bridge limit (see that script).",
        f"seed={SEED}, reps={REPS}, steps={STEPS}, numpy={np.__version__}",
        '"""',
        "",
        f"TRIMS = {[float(v) for v in TRIMS]!r}",
        f"REPS = {REPS!r}",
        f"TAIL = {[float(p) for p in TAIL]!r}",
        "#: QUANTILES[i][k - 1][j]: the value exceeded with probability TAIL[j] for k parameters",
        "#: when the cut points cover [TRIMS[i], 1 - TRIMS[i]]",
        "QUANTILES = [",
    ]
    for i in range(len(TRIMS)):
        lines.append("    [")
        for k in range(K_MAX):
            lines.append("        [" + ", ".join(f"{v:.6g}" for v in quant[:, i, k]) + "],")
        lines.append("    ],")
    lines.append("]")
    Path(target).write_text("\n".join(lines) + "\n", encoding="utf-8")


if __name__ == "__main__":
    main(*sys.argv[1:])
