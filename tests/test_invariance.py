"""Longitudinal invariance: recovery of a known truth in simulated panels (fixed seeds)."""

import numpy as np
import pandas as pd
import pytest

from wavetrail.codebook import parse_codebook
from wavetrail.errors import ModelError
from wavetrail.invariance import INVARIANCE_COLUMNS, invariance_spec, invariance_table, longitudinal_invariance
from wavetrail.panel import load_panel

ITEMS = [f"i{j}" for j in range(1, 9)]
WAVES = [1, 2, 3, 4, 5]


def simulate(n=400, drift=0.0, drift_item=4, seed=0, attrition=0.1, item_missing=0.0):
    """A 5-wave, 8-item panel whose common factor is measured the same way at every wave,
    except that item ``drift_item`` gains ``drift`` per wave in its intercept.
    Same-item residuals are correlated over waves (a stable item-specific part);
    people drop out at random (``attrition`` per wave, MCAR)."""
    rng = np.random.default_rng(seed)
    lam = np.array([1, .8, .9, .7, .85, .75, .9, .8])
    nu = np.array([3.0, 2.8, 3.2, 2.9, 3.1, 3.0, 2.7, 3.3])
    th = np.array([.5, .6, .5, .7, .55, .6, .5, .6])
    T, k = len(WAVES), len(ITEMS)
    eta = np.empty((n, T))
    eta[:, 0] = rng.normal(size=n)
    for t in range(1, T):
        eta[:, t] = 0.7 * eta[:, t - 1] + rng.normal(size=n) * np.sqrt(1 - 0.49)
    eta += 0.1 * np.arange(T)
    specific = rng.normal(size=(n, k)) * np.sqrt(0.15)
    present = np.ones(n, bool)
    frames = []
    for t in range(T):
        if t:
            present &= rng.random(n) > attrition
        x = nu + eta[:, [t]] * lam + specific + rng.normal(size=(n, k)) * np.sqrt(th)
        x[:, drift_item] += drift * t
        x[rng.random((n, k)) < item_missing] = np.nan
        df = pd.DataFrame(x, columns=ITEMS)
        df.insert(0, "wave", WAVES[t])
        df.insert(0, "id", np.arange(n))
        frames.append(df[present])
    return pd.concat(frames, ignore_index=True)


def run(data):
    return longitudinal_invariance(data, ITEMS, WAVES)


def test_spec_degrees_of_freedom():
    # 40 observed: 40 + 40*41/2 = 860 moments. Configural: 35 loadings + 40 intercepts +
    # 40 residual variances + 80 same-item residual covariances + 15 factor (co)variances = 210
    conf = invariance_spec(ITEMS, 5, "configural")
    metric = invariance_spec(ITEMS, 5, "metric")
    scalar = invariance_spec(ITEMS, 5, "scalar")
    assert (conf.k, metric.k, scalar.k) == (210, 182, 154)  # metric: 35 -> 7 loadings; scalar: 40 -> 8 + 4 means
    partial = invariance_spec(ITEMS, 5, "scalar", free_intercepts=["i5"])
    assert partial.k == scalar.k + 4
    with pytest.raises(ModelError):
        invariance_spec(ITEMS, 5, "scalar", free_intercepts=ITEMS)


def test_drifting_intercept_is_found():
    res = run(simulate(drift=0.2, seed=1))
    t = res.table.set_index("step")
    assert list(res.table.columns) == INVARIANCE_COLUMNS
    assert t.loc["configural", "df"] == 860 - 210 and t.loc["scalar", "df"] == 860 - 154
    assert t.loc["metric", "decision"] == "holds"
    assert t.loc["scalar", "decision"] == "fails" and t.loc["scalar", "delta_cfi"] < -0.01
    assert res.free_order["item"].iloc[0] == "i5"
    assert t.loc["partial_scalar", "freed"] == "i5" and t.loc["partial_scalar", "decision"] == "holds"
    assert t["converged"].all()


def test_no_drift_passes_every_step():
    res = run(simulate(drift=0.0, seed=2))
    t = res.table.set_index("step")
    assert list(t.index) == ["configural", "metric", "scalar"]
    assert (t.loc[["metric", "scalar"], "decision"] == "holds").all()
    assert (t.loc[["metric", "scalar"], "decision_all_indices"] == "holds").all()
    assert t.loc["configural", "cfi"] > 0.95 and t.loc["configural", "rmsea"] < 0.05
    # nested models: chi-square never falls when constraints are added
    assert t.loc["configural", "chisq"] <= t.loc["metric", "chisq"] <= t.loc["scalar", "chisq"]


def test_missing_items_are_fitted_by_fiml():
    data = simulate(n=300, drift=0.25, seed=3)
    rng = np.random.default_rng(5)
    rows = rng.choice(len(data), 25, replace=False)
    for r, c in zip(rows, rng.choice(ITEMS, 25)):  # scattered item non-response: new patterns
        data.loc[data.index[r], c] = np.nan
    res = run(data)
    t = res.table.set_index("step")
    assert t.loc["scalar", "decision"] == "fails" and res.free_order["item"].iloc[0] == "i5"


@pytest.mark.slow
def test_recovery_rates_over_repeated_panels():
    found = sum(run(simulate(drift=0.2, seed=100 + r)).free_order["item"].head(1).tolist() == ["i5"]
                for r in range(8))
    clean = 0
    for r in range(8):
        t = run(simulate(drift=0.0, seed=200 + r)).table.set_index("step")
        clean += bool((t.loc[["metric", "scalar"], "decision"] == "holds").all())
    assert found >= 7 and clean >= 7


def test_invariance_table_from_a_panel():
    d = simulate(n=300, drift=0.0, seed=4)
    lines = ["study: {id: id, wave: wave, waves: [1, 2, 3, 4, 5]}", "variables:", "  - {name: id}"]
    lines += [f"  - {{name: {i}, type: number, scale: mood}}" for i in ITEMS]
    lines += ["scales:", "  mood: {label: Mood}", "  other: {label: Other}"]
    lines[3:3] = ["  - {name: z1, type: number, scale: other}", "  - {name: z2, type: number, scale: other}"]
    d = d.assign(z1=1.0, z2=2.0)  # constant: cannot be modelled, reported as not estimated
    panel = load_panel(d, parse_codebook("\n".join(lines) + "\n"))
    table = invariance_table(panel)
    mood = table[table["scale"] == "mood"].set_index("step")
    assert list(mood.index) == ["configural", "metric", "scalar"]
    other = table[table["scale"] == "other"]
    assert other["decision"].tolist() == ["not estimated"] and "constant" in other["note"].iloc[0]
