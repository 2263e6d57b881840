"""The demo as a new user builds it: does the moderator forest find what the simulator planted?

The demo panel (examples/demo_panel/simulate.py, invented) plants five moderators of the
sleep-difficulty trajectories among 37 candidate predictors: screen_evening (slope, linear),
chronotype (curvature, threshold), family_conflict x house_rules (intercept, interaction)
and physical_activity (spread of the slopes only). The full demo build (100 trees) must
rank exactly these five first, give the planted pair the largest interaction strength,
and write that pair's two-way expected trajectories with the planted direction: the
conflict gradient of the intercept is steeper without house rules.
"""

from __future__ import annotations

import pandas as pd
import pytest

from wavetrail.build import build_project
from wavetrail.project import make_demo

PLANTED = {"screen_evening", "chronotype", "family_conflict", "house_rules", "physical_activity"}


@pytest.mark.slow
def test_demo_forest_finds_the_planted_moderators_and_pair(tmp_path):
    root = make_demo(tmp_path / "demo")
    build_project(root, cores=2)
    forest = root / "results" / "forest"
    imp = pd.read_csv(forest / "importance.csv")
    assert set(imp["predictor"][:5]) == PLANTED
    assert (imp["importance"][:5] > 2 * imp["se"][:5]).all()
    assert (imp["importance"][5:] <= 0).all()  # no noise predictor is ever split on usefully
    inter = pd.read_csv(forest / "interactions.csv")
    assert {inter["predictor_a"][0], inter["predictor_b"][0]} == {"family_conflict", "house_rules"}
    assert inter["h"][0] > 0.1
    pairs = pd.read_csv(forest / "dependence_pairs.csv")
    first = pairs[pairs["time"] == pairs["time"].min()]
    if first["predictor_a"].iloc[0] != "family_conflict":
        first = first.rename(columns={"predictor_a": "predictor_b", "predictor_b": "predictor_a",
                                      "level_a": "level_b", "level_b": "level_a"})
    wide = first.pivot_table(index="level_b", columns="level_a", values="expected")
    gradient = wide["high"] - wide["low"]  # intercept at high minus low family conflict
    assert gradient[1] > gradient[2] and gradient[1] > gradient[3]
