"""The demo panel simulator: determinism, design, and recovery of the truth it plants.

The recovery checks are deliberately simple (per-person least-squares lines through each
person's observed scale scores), so they test the simulator, not the workflow's models.
"""

from __future__ import annotations

import importlib.util

import numpy as np
import pandas as pd
import pytest

from wavetrail.resources import examples_dir


@pytest.fixture(scope="module")
def demo():
    spec = importlib.util.spec_from_file_location("demo_sim", examples_dir() / "demo_panel" / "simulate.py")
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


@pytest.fixture(scope="module")
def panel(demo):
    return demo.simulate_panel()


@pytest.fixture(scope="module")
def ols(demo, panel):
    """Per-person OLS intercept and slope of the observed scale means (>= 3 waves)."""
    long, people = panel
    items = [i[0] for i in demo.ITEMS]
    answers = long[items].astype(float).where(long[items] > 0)
    for name, _, reverse, *_ in demo.ITEMS:
        if reverse:
            answers[name] = 6 - answers[name]
    score = answers.mean(axis=1)
    wide = pd.DataFrame({"pid": long["pid"], "wave": long["wave"], "score": score}).pivot(
        index="pid", columns="wave", values="score")
    t = np.asarray(demo.TIME_SCORES, dtype=float)
    rows = {}
    for pid, row in wide.iterrows():
        ok = row.notna().to_numpy()
        if ok.sum() >= 3:
            slope, intercept = np.polyfit(t[ok], row.to_numpy()[ok], 1)
            rows[pid] = (intercept, slope)
    fits = pd.DataFrame.from_dict(rows, orient="index", columns=["intercept", "slope"])
    return fits.join(people.drop(columns=["intercept", "slope"]), how="left")


def test_same_seed_same_bytes_other_seed_other_data(demo):
    a, _ = demo.simulate_panel(seed=11)
    b, _ = demo.simulate_panel(seed=11)
    c, _ = demo.simulate_panel(seed=12)
    from wavetrail._io import table_to_csv

    assert table_to_csv(a) == table_to_csv(b)
    assert table_to_csv(a) != table_to_csv(c)


def test_design_matches_the_scenario(demo, panel):
    long, people = panel
    assert long["pid"].nunique() == 800 and len(people) == 800
    assert sorted(long["wave"].unique()) == [1, 2, 3, 4, 5]
    counts = long.groupby("wave").size()
    assert counts[1] == 800
    assert (counts.diff().dropna() < 0).all()          # attrition every wave
    assert 0.6 < counts[5] / 800 < 0.85
    assert not long.duplicated(["pid", "wave"]).any()
    assert 12 <= long.loc[long.wave == 1, "age"].min() and long.loc[long.wave == 1, "age"].max() <= 13
    assert long.loc[long.wave == 5, "age"].max() < 17.5
    items = [i[0] for i in demo.ITEMS]
    assert len(items) == 8 and sum(i[2] for i in demo.ITEMS) == 2
    values = set(np.unique(long[items].to_numpy()))
    assert values == {-99, -98, 1, 2, 3, 4, 5}
    share_missing = (long[items] < 0).to_numpy().mean()
    assert 0.015 < share_missing < 0.04
    assert len(demo.PREDICTORS) == 36
    names = [p[0] for p in demo.PREDICTORS]
    for needed in ("screen_evening", "chronotype", "caffeine", "physical_activity", "anxiety",
                   "family_conflict", "house_rules", "school_start", "commute_min", "siblings",
                   "income_band", "pubertal_stage", "sex"):
        assert needed in names
    # predictors are recorded at wave 1 only
    later = long[long.wave > 1]
    assert later[names].isna().all().all()
    assert long.loc[long.wave == 1, "screen_evening"].notna().all()


def test_linear_moderator_moves_the_slopes(ols):
    # truth: slope += 0.05 per evening hour of screen time (see TRUTH)
    coef = np.polyfit(ols["screen_evening"], ols["slope"], 1)[0]
    assert 0.03 < coef < 0.07
    # a noise predictor with a similar spread does nothing
    noise = np.polyfit(ols["homework_hours"], ols["slope"], 1)[0]
    assert abs(noise) < 0.02


def test_threshold_moderator_bends_the_trajectories(ols):
    # truth: curvature += 0.03 for chronotype >= 25; a least-squares line over t = 0..4 turns
    # a curvature c into a slope of 4c, so the slopes differ by about 0.12 (less after rounding)
    high = ols["chronotype"] >= 25
    diff = ols.loc[high, "slope"].mean() - ols.loc[~high, "slope"].mean()
    assert 0.05 < diff < 0.16
    # and it is a step, not a line: just below the cut looks like far below it
    low_band = ols.loc[ols["chronotype"].between(10, 17), "slope"].mean()
    near_band = ols.loc[ols["chronotype"].between(18, 24), "slope"].mean()
    assert abs(near_band - low_band) < 0.04


def test_interaction_pair_moves_the_intercept_most_without_rules(ols):
    # truth: intercept += 0.02 per conflict point everywhere, 0.14 where house_rules == 1
    # (the answers' loadings below 1 and rounding shrink the observed slopes a little)
    none = ols["house_rules"] == 1
    with_none = np.polyfit(ols.loc[none, "family_conflict"], ols.loc[none, "intercept"], 1)[0]
    with_rules = np.polyfit(ols.loc[~none, "family_conflict"], ols.loc[~none, "intercept"], 1)[0]
    assert 0.09 < with_none < 0.19
    assert -0.01 < with_rules < 0.05
    assert with_none - with_rules > 0.07


def test_spread_moderator_changes_variance_not_mean(ols):
    # truth: slope SD 0.16 below 4 active days, 0.05 from 4 days on; the same mean
    inactive = ols["physical_activity"] < 4
    var_in, var_act = ols.loc[inactive, "slope"].var(), ols.loc[~inactive, "slope"].var()
    assert var_in / var_act > 1.25
    assert abs(ols.loc[inactive, "slope"].mean() - ols.loc[~inactive, "slope"].mean()) < 0.035
    # a regression of the slopes on the predictor sees (almost) nothing
    coef = np.polyfit(ols["physical_activity"], ols["slope"], 1)[0]
    assert abs(coef) < 0.012


def test_true_factors_follow_the_truth_table(demo, panel):
    _, people = panel
    inactive = people["physical_activity"] < 4
    resid = people["slope"] - 0.05 * (people["screen_evening"] - 2.2)
    assert resid[inactive].std() == pytest.approx(0.16, rel=0.12)
    assert resid[~inactive].std() == pytest.approx(0.05, rel=0.12)
    assert demo.TRUTH["effects"][0]["predictor"] == "screen_evening"
    assert set(demo.TRUTH["noise"]).isdisjoint(demo.TRUE_MODERATORS)
    assert len(demo.TRUTH["noise"]) == 36 - 5 + 1


def test_demo_codebook_and_checks_give_warnings_but_no_errors(demo, tmp_path):
    codebook_mod = pytest.importorskip("wavetrail.codebook")
    checks = pytest.importorskip("wavetrail.checks")
    import yaml

    from wavetrail._io import write_table

    long, _ = demo.simulate_panel()
    write_table(tmp_path / "panel.csv", long)
    (tmp_path / "codebook.yaml").write_text(yaml.safe_dump(demo.codebook(), sort_keys=False))
    codebook = codebook_mod.load_codebook(tmp_path / "codebook.yaml")
    assert set(codebook.scales) == {"sleep_difficulty"}
    findings = checks.run_checks([str(tmp_path / "panel.csv")], codebook)
    severities = set(findings["severity"])
    assert "error" not in severities
    assert "warning" in severities


def test_truth_document_lists_every_planted_effect(demo):
    text = demo.truth_markdown()
    for effect in demo.TRUTH["effects"]:
        assert effect["rule"] in text
    assert "invented" in text
