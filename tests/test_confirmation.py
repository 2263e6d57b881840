"""Predictors of growth in the workflow and the forest's held-out split: names checked up front,
the conditional model recovering a known truth through the stage's tables, and a seeded split
that depends only on the master seed and the people."""

from __future__ import annotations

import hashlib

import numpy as np
import pandas as pd
import pytest

from test_outcome_settings import CODEBOOK
from wavetrail._io import write_table
from wavetrail.codebook import parse_codebook
from wavetrail.config import check_names, default_config
from wavetrail.errors import ConfigError
from wavetrail.stages.forest import confirmation_names, holdout_split
from wavetrail.stages.growth import CONDITIONAL_COLUMNS, CONDITIONAL_TEST_COLUMNS, fit_conditional_models


def test_growth_predictors_and_confirm_names_are_checked_with_line_and_key():
    cb = parse_codebook(CODEBOOK)
    config = default_config()
    config["growth"]["outcomes"] = ["mood"]
    config["growth"]["predictors"] = ["sex", "sportt", "m2"]
    config["forest"]["holdout"] = 0.3
    config["forest"]["confirm"] = ["sex", "weigth"]
    lines = {("growth", "predictors", 1): 8, ("growth", "predictors", 2): 8, ("forest", "confirm", 1): 15}
    with pytest.raises(ConfigError) as err:
        check_names(config, cb, source="config/config.yaml", lines=lines)
    text = err.value.message
    assert "3 problems" in text
    assert "config/config.yaml, line 8: growth.predictors[1] 'sportt' is not a variable of the codebook; " \
           "did you mean 'sport'?" in text
    assert "growth.predictors[2] 'm2' is part of a growth outcome" in text
    assert "config/config.yaml, line 15: forest.confirm[1] names 'weigth', which is not a variable" in text
    # a confirm list is not read while nothing is held out; good names pass
    config["forest"]["holdout"] = 0
    config["growth"]["predictors"] = ["sex", "sport"]
    assert check_names(config, cb) == (["mood"], "mood")


def test_holdout_split_is_seeded_by_the_master_seed_and_the_people_only():
    ids = [f"p{i:03d}" for i in range(200)]
    kept, held, rec = holdout_split(ids, 0.3, 7)
    assert len(held) == 60 and len(kept) == 140 and not set(kept) & set(held)
    assert set(kept) | set(held) == set(ids)
    again = holdout_split(list(reversed(ids)), 0.3, 7)  # order of the input does not matter
    assert again[1] == held and again[2] == rec
    assert holdout_split(ids, 0.3, 8)[1] != held  # another master seed, another split
    assert rec["held_out_sha256"] == hashlib.sha256("".join(f"{i}\n" for i in held).encode()).hexdigest()
    assert rec["share"] == 0.3 and rec["held_out"] == 60 and rec["forest_people"] == 140


def test_confirmation_names_take_the_top_tested_predictors_or_nothing_when_nothing_was_found():
    imp = pd.DataFrame({"predictor": ["a", "b", "c", "d"], "importance": [0.4, 0.1, 0.0, np.nan],
                        "rank": [1, 2, 3, np.nan]})
    assert confirmation_names({"confirm": 3}, imp) == ["a", "b", "c"]
    assert confirmation_names({"confirm": 10}, imp) == ["a", "b", "c"]  # never an untested predictor
    assert confirmation_names({"confirm": ["d", "a"]}, imp) == ["d", "a"]
    flat = imp.assign(importance=[0.0, 0.0, 0.0, np.nan])
    assert confirmation_names({"confirm": 3}, flat) == []


def _panel(n=600, seed=11):
    """Linear growth over 4 waves; slope = 0.5 + 0.3 sport + 0.4 [boy]; intercept = 2 + 0.5 [boy].

    Invented data: the truth of the recovery test below.
    """
    rng = np.random.default_rng(seed)
    sex = rng.integers(1, 3, n)
    sport = rng.uniform(0, 6, n).round(1)
    boy = (sex == 2).astype(float)
    icpt = 2.0 + 0.5 * boy + rng.normal(0, 0.6, n)
    slope = 0.5 + 0.3 * sport + 0.4 * boy + rng.normal(0, 0.2, n)
    t = np.arange(4.0)
    y = icpt[:, None] + slope[:, None] * t + rng.normal(0, 0.4, (n, 4))
    y[rng.random((n, 4)) < 0.15] = np.nan  # missing waves (FIML)
    ids = [f"{i}" for i in range(n)]
    scores = pd.DataFrame([{"id": ids[i], "wave": w + 1, "scale": "weight", "score": y[i, w],
                            "n_items": int(np.isfinite(y[i, w]))} for i in range(n) for w in range(4)])
    pred = pd.DataFrame({"sex": pd.Categorical(sex), "sport": sport}, index=pd.Index(ids, name="pid"))
    pred.loc[pred.index[:7], "sport"] = np.nan  # seven people without a sport value
    return scores, pred


def test_conditional_model_of_the_stage_recovers_the_truth_and_is_byte_stable(tmp_path):
    cb = parse_codebook(CODEBOOK)
    scores, pred = _panel()
    eff, tests = fit_conditional_models(scores, pred, [1, 2, 3, 4], [0, 1, 2, 3], ["weight"], "linear", "free",
                                        bounded=True, seed=3, codebook=cb)
    assert list(eff.columns) == CONDITIONAL_COLUMNS and list(tests.columns) == CONDITIONAL_TEST_COLUMNS
    e = eff.set_index(["term", "factor"])
    truth = {("sport", "slope"): 0.3, ("sport", "intercept"): 0.0, ("sex[boy]", "slope"): 0.4,
             ("sex[boy]", "intercept"): 0.5}
    for key, value in truth.items():  # within 3.5 SE of the planted value
        assert abs(e.loc[key, "estimate"] - value) < 3.5 * e.loc[key, "se"], (key, e.loc[key])
    assert set(eff.loc[eff["predictor"] == "sex", "reference"]) == {"girl"}
    t = tests.set_index("predictor")
    with_outcome = scores.dropna(subset=["score"])["id"].nunique()
    assert (t["n_excluded"] == 7).all() and (t["n"] == with_outcome - 7).all() and (t["df"] == 2).all()
    assert t.loc["sport", "p"] < 1e-10 and t.loc["sex", "p"] < 1e-10
    assert bool(t.loc["sex", "converged"]) and bool(t.loc["sex", "admissible"])
    assert set(eff["model"]) == {"linear-free conditional"}

    again = fit_conditional_models(scores, pred, [1, 2, 3, 4], [0, 1, 2, 3], ["weight"], "linear", "free",
                                   bounded=True, seed=3, codebook=cb)
    for k, (first, second) in enumerate(zip((eff, tests), again)):
        write_table(tmp_path / f"a{k}.csv", first)
        write_table(tmp_path / f"b{k}.csv", second)
        assert (tmp_path / f"a{k}.csv").read_bytes() == (tmp_path / f"b{k}.csv").read_bytes()


def _write(root, name, df):
    path = root / name
    path.parent.mkdir(parents=True, exist_ok=True)
    write_table(path, df)


def test_report_names_exploration_and_confirmation_and_what_was_confirmed(tmp_path):
    from wavetrail.report import open_report
    from wavetrail.stages.forest import CONFIRMATION_TEST_COLUMNS

    eff = pd.DataFrame([["y", "linear-free conditional (held-out people)", p, t, lv, ref, f, 0.0012, 0.0004, 3.0,
                         0.0027, 0.2]
                        for p, t, lv, ref in [("conflict", "conflict", "", ""), ("rules", "rules[strict]", "strict", "none")]
                        for f in ("intercept", "slope")], columns=CONDITIONAL_COLUMNS)
    rows = [["y", "linear-free conditional (held-out people)", "conflict", 1, "number", 2, 14.2, 2, 0.0008, 0.0016,
             "yes", 120, 3, 125, -800.5, True, True, ""],
            ["y", "linear-free conditional (held-out people)", "rules", 2, "category", 2, 1.1, 2, 0.58, 0.58, "no",
             120, 3, 125, -800.5, True, True, ""]]
    _write(tmp_path, "results/forest/confirmation.csv", eff)
    _write(tmp_path, "results/forest/confirmation_tests.csv", pd.DataFrame(rows, columns=CONFIRMATION_TEST_COLUMNS))
    html = open_report(tmp_path, {}, {"forest": {"enabled": True}})._confirmation()
    assert "The forest above is exploration: 125 people were held out" in html
    assert "The held-out model below is confirmation" in html and "not causal effects" in html
    assert "Confirmed in the held-out people: conflict." in html and "Not confirmed: rules." in html
    assert "rules: strict vs none" in html and "0.0012" in html
    # three people left out: below report.min_cell (5 by default), so not shown as a number
    assert "fewer than 5 with outcome data left out because a predictor value is missing" in html
    html = open_report(tmp_path, {}, {"forest": {"enabled": True}, "min_cell": 3})._confirmation()
    assert "3 with outcome data left out because a predictor value is missing" in html
    _write(tmp_path, "results/forest/confirmation_tests.csv", pd.DataFrame(columns=CONFIRMATION_TEST_COLUMNS))
    html = open_report(tmp_path, {}, {"forest": {"enabled": True}})._confirmation()
    assert "No people were held out of the forest" in html and "remain exploratory" in html


@pytest.mark.slow
def test_workflow_fits_the_conditional_model_and_reports_it(tmp_path):
    """A small project through the whole build: growth.predictors -> conditional tables -> report."""
    from test_outcome_settings import CONFIG, panel_frame

    from wavetrail.build import build_project
    from wavetrail.project import new_project
    from wavetrail.registry import register_files

    root = new_project(tmp_path / "p", title="Predictors of growth")
    (root / "config" / "codebook.yaml").write_text(CODEBOOK, encoding="utf-8")
    config = CONFIG.replace("  residuals: equal\n", "  residuals: equal\n  predictors: [sex, sport]\n")
    config = config.replace("forest:\n", "forest:\n  enabled: false\n")
    (root / "config" / "config.yaml").write_text(config, encoding="utf-8")
    frame = panel_frame(n=120)
    frame.loc[frame["pid"].isin(frame["pid"].unique()[:2]), "sport"] = np.nan  # two people without sport
    frame.to_csv(root / "data" / "raw" / "panel.csv", index=False)
    register_files(root, ["data/raw/panel.csv"])
    build_project(root, cores=1)
    tests = pd.read_csv(root / "results/growth/conditional_tests.csv")
    assert list(tests["predictor"]) == ["sex", "sport"] and set(tests["outcome"]) == {"weight"}
    assert (tests["n_excluded"] == 2).all() and (tests["df"] == 2).all() and tests["p"].notna().all()
    paths = pd.read_csv(root / "results/growth/conditional.csv")
    assert set(paths["term"]) == {"sex[boy]", "sport"} and set(paths["factor"]) == {"intercept", "slope"}
    page = (root / "results/write-up/report.html").read_text(encoding="utf-8")
    assert "Predictors of growth" in page and "Hours of sport" in page
    assert "fewer than 5 with outcome data left out because a predictor value is missing" in page  # min_cell 5
