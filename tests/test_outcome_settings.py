"""Single measures as outcomes, declared transformations, and mistakes refused before the build.

Every refusal goes through the real command line (`wavetrail check` and `wavetrail build`)
and asserts: exit code 1, the file, line and key named, no traceback, Snakemake never
started (no `.snakemake/` folder) and every file already in the project unchanged.
The small panel is invented for these tests (a measured value `weight` in kg, a 3-item
scale, a category and a time-invariant variable).
"""

from __future__ import annotations

import hashlib
import subprocess
import sys
import textwrap
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from wavetrail.codebook import parse_codebook
from wavetrail.config import check_names, default_config, resolve_outcomes
from wavetrail.errors import CodebookError, ConfigError
from wavetrail.panel import derive_values, load_panel
from wavetrail.scoring import score_panel

CODEBOOK = textwrap.dedent("""\
    study:
      id: pid
      wave: wave
      waves: [1, 2, 3]
      time_scores: [0, 1, 2]
    variables:
      - {name: pid, type: integer}
      - {name: weight, label: Body weight, unit: kg, type: number, range: [20, 200], missing: {-99: not weighed}}
      - {name: log_weight, label: Log body weight, derived_from: weight, transform: log}
      - {name: m1, type: integer, range: [1, 5], missing: {-99: refused}, scale: mood}
      - {name: m2, type: integer, range: [1, 5], missing: {-99: refused}, scale: mood}
      - {name: m3, type: integer, range: [1, 5], missing: {-99: refused}, scale: mood}
      - {name: sex, type: category, levels: {1: girl, 2: boy}, waves: [1]}
      - {name: sport, label: Hours of sport, type: number, waves: [1]}
    scales:
      mood: {label: Mood}
    """)

#: line numbers below are those of this text (1-based)
CONFIG = textwrap.dedent("""\
    data: [data/raw/panel.csv]
    codebook: config/codebook.yaml
    seed: 7
    growth:
      outcomes: [weight]
      shapes: [linear]
      residuals: equal
    invariance:
      scales: all
    forest:
      outcome: null
      predictors: wave1
      trees: 4
    """)


def panel_frame(n=30, seed=3) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    rows = []
    for pid in range(1, n + 1):
        base = rng.normal(60, 8)
        slope = rng.normal(1.5, 0.5)
        sex = int(rng.integers(1, 3))
        sport = round(float(rng.uniform(0, 6)), 1)
        for wave in (1, 2, 3):
            m = rng.integers(1, 6, 3)
            rows.append({"pid": pid, "wave": wave, "weight": round(base + slope * (wave - 1) + rng.normal(0, 1), 1),
                         "m1": m[0], "m2": m[1], "m3": m[2], "sex": sex, "sport": sport})
    return pd.DataFrame(rows)


@pytest.fixture(scope="module")
def template(tmp_path_factory):
    from wavetrail.project import new_project

    root = new_project(tmp_path_factory.mktemp("outcomes") / "p", title="Outcomes test")
    (root / "config" / "codebook.yaml").write_text(CODEBOOK, encoding="utf-8")
    (root / "config" / "config.yaml").write_text(CONFIG, encoding="utf-8")
    panel_frame().to_csv(root / "data" / "raw" / "panel.csv", index=False)
    (root / "results" / "checks").mkdir(parents=True, exist_ok=True)
    (root / "results" / "checks" / "earlier.csv").write_text("kept,1\n", encoding="utf-8")  # written before
    return root


@pytest.fixture
def project(template, tmp_path):
    import shutil

    return Path(shutil.copytree(template, tmp_path / "p", symlinks=True))


def run(root, *args):
    return subprocess.run([sys.executable, "-m", "wavetrail.cli", *args], cwd=root, capture_output=True,
                          text=True, timeout=300)


def digests(root: Path) -> dict:
    return {p.relative_to(root).as_posix(): hashlib.sha256(p.read_bytes()).hexdigest()
            for p in sorted(root.rglob("*")) if p.is_file() and ".git" not in p.parts}


def refused(root, command, *needles):
    """Run `command`; assert a clean refusal naming every needle and that nothing was touched."""
    before = digests(root)
    proc = run(root, command)
    out = proc.stdout + proc.stderr
    assert proc.returncode == 1, out
    assert "Traceback" not in out, out
    for needle in needles:
        assert needle in proc.stderr, proc.stderr
    assert not (root / ".snakemake").exists(), "Snakemake started"
    assert digests(root) == before, "a file of the project changed"
    return proc.stderr


def edit(root, name, old, new):
    path = root / name
    text = path.read_text(encoding="utf-8")
    assert old in text, (old, text)
    path.write_text(text.replace(old, new), encoding="utf-8")


# --------------------------------------------------------------------------- refusals through the CLI

@pytest.mark.parametrize("command", ["check", "build"])
def test_unknown_growth_outcome_names_line_key_and_close_name(project, command):
    edit(project, "config/config.yaml", "outcomes: [weight]", "outcomes: [wieght]")
    err = refused(project, command, "config/config.yaml, line 5", "growth.outcomes[0] 'wieght'", "'weight'")
    assert "did you mean" in err


@pytest.mark.parametrize("command", ["check", "build"])
def test_forest_outcome_predictor_and_pair_resolved_up_front(project, command):
    edit(project, "config/config.yaml", "  outcome: null\n  predictors: wave1\n",
         "  outcome: mood_x\n  predictors: [sex, sportt]\n  interaction_pairs: [[sex, height]]\n")
    err = refused(project, command, "config/config.yaml, line 11: forest.outcome 'mood_x'",
                  "config/config.yaml, line 12: forest.predictors[1] 'sportt'",
                  "config/config.yaml, line 13: forest.interaction_pairs[0] names 'height'")
    assert "3 problems" in err and "'sport'" in err


@pytest.mark.parametrize("command", ["check", "build"])
def test_invariance_of_a_single_measure_is_refused(project, command):
    edit(project, "config/config.yaml", "scales: all", "scales: [weight]")
    refused(project, command, "config/config.yaml, line 9: invariance.scales[0] 'weight'", "multi-item scales only")


@pytest.mark.parametrize("command", ["check", "build"])
def test_empty_outcomes_without_scales_lists_what_could_be_named(project, command):
    text = (project / "config/codebook.yaml").read_text(encoding="utf-8")
    text = text.replace(", scale: mood", "").replace("scales:\n  mood: {label: Mood}\n", "")
    (project / "config/codebook.yaml").write_text(text, encoding="utf-8")
    edit(project, "config/config.yaml", "outcomes: [weight]", "outcomes: []")
    err = refused(project, command, "config/config.yaml, line 5", "growth.outcomes is empty")
    assert "weight, log_weight, m1, m2, m3" in err


@pytest.mark.parametrize("scores, shown", [("[0, 2, 1]", "not strictly increasing"),
                                           ("[0, 1, .inf]", "finite number")])
def test_time_scores_out_of_order_or_infinite(project, scores, shown):
    edit(project, "config/codebook.yaml", "time_scores: [0, 1, 2]", f"time_scores: {scores}")
    for command in ("check", "build"):
        refused(project, command, "codebook.yaml:5: study.time_scores", shown)


@pytest.mark.parametrize("old, new, shown", [
    ("range: [1, 5], missing: {-99: refused}, scale: mood}\n  - {name: m2",
     "range: [1, 5], missing: {3: not applicable}, scale: mood}\n  - {name: m2",
     "missing code 3 (not applicable) lies inside the range [1, 5]"),
    ("levels: {1: girl, 2: boy}", "levels: {1: girl, 2: boy}, missing: {2: refused}",
     "missing code 2 (refused) is also the level 2 (boy)"),
])
def test_missing_code_that_is_a_valid_answer(project, old, new, shown):
    edit(project, "config/codebook.yaml", old, new)
    line = next(i for i, t in enumerate((project / "config/codebook.yaml").read_text().splitlines(), 1) if new.split("\n")[0] in t)
    for command in ("check", "build"):
        refused(project, command, f"codebook.yaml:{line}:", shown)


@pytest.mark.parametrize("command", ["check", "build"])
def test_header_only_data_file(project, command):
    (project / "data/raw/panel.csv").write_text("pid,wave,weight,m1,m2,m3,sex,sport\n", encoding="utf-8")
    refused(project, command, "data/raw/panel.csv has a header but no data rows", "line 1")


def test_log_of_zero_is_a_finding_with_rows_and_what_to_do(project):
    frame = panel_frame()
    frame.loc[4, "weight"] = 0  # file line 6 (header = line 1)
    frame.to_csv(project / "data/raw/panel.csv", index=False)
    before = digests(project)
    proc = run(project, "check", "--findings-to", "findings-now.csv")
    assert proc.returncode == 1 and "Traceback" not in proc.stdout + proc.stderr
    findings = pd.read_csv(project / "findings-now.csv")
    hit = findings[findings["check"] == "transform_domain"]
    assert len(hit) == 1 and hit["variable"].iloc[0] == "log_weight" and hit["rows"].iloc[0] == "panel.csv:6"
    assert "log1p" in hit["message"].iloc[0] and "missing" in hit["message"].iloc[0]
    assert "panel.csv:6" in proc.stdout  # the rows column is shown
    after = digests(project)
    assert {k: v for k, v in after.items() if k != "findings-now.csv"} == before


def test_xlsx_message_names_the_sheet_and_how_to_choose(project):
    pytest.importorskip("openpyxl")
    path = project / "data/raw/panel.xlsx"
    with pd.ExcelWriter(path) as xl:
        pd.DataFrame({"note": ["exported by the lab"]}).to_excel(xl, sheet_name="Notes", index=False)
        panel_frame().to_excel(xl, sheet_name="Data", index=False)
    edit(project, "config/config.yaml", "data: [data/raw/panel.csv]", "data: [data/raw/panel.xlsx]")
    err = refused(project, "check", "sheet 'Notes'", "'Data'", "move the data sheet to the front")
    assert "id column 'pid'" in err


# --------------------------------------------------------------------------- library behaviour

def test_defaults_resolve_before_the_build():
    cb = parse_codebook(CODEBOOK)
    config = default_config()
    assert resolve_outcomes(config, cb) == (["mood"], "mood")  # [] = every scale, null = first outcome
    config["growth"]["outcomes"] = ["weight", "mood"]
    assert check_names(config, cb) == (["weight", "mood"], "weight")
    config["forest"]["enabled"] = False
    assert resolve_outcomes(config, cb) == (["weight", "mood"], None)
    config["growth"]["outcomes"] = ["sex"]
    with pytest.raises(ConfigError, match="has type category"):
        check_names(config, cb)
    config["growth"]["outcomes"] = ["sport"]
    with pytest.raises(ConfigError, match=r"measured at 1 wave\(s\)"):
        check_names(config, cb)


def test_single_measure_scores_and_default_predictors(tmp_path):
    frame = panel_frame()
    frame.loc[0, "weight"] = -99
    cb = parse_codebook(CODEBOOK)
    panel = load_panel([frame], cb)
    scores = score_panel(panel, measures=["weight", "log_weight", "mood"])
    assert list(scores.columns) == ["id", "wave", "scale", "score", "n_items"]
    assert list(pd.unique(scores["scale"])) == ["mood", "weight", "log_weight"]  # a scale is never doubled
    w = scores[scores["scale"] == "weight"]
    assert w["n_items"].tolist()[:2] == [0, 1] and np.isnan(w["score"].iloc[0])
    assert w["score"].iloc[1:].tolist() == frame["weight"].iloc[1:].astype(float).tolist()
    lw = scores[scores["scale"] == "log_weight"]["score"].to_numpy()
    np.testing.assert_allclose(lw[1:], np.log(frame["weight"].iloc[1:].to_numpy(dtype=float)), rtol=0, atol=1e-15)
    # the default predictor set leaves out the outcome's own raw variables
    assert list(panel.predictors("wave1").columns) == ["weight", "log_weight", "sex", "sport"]
    assert list(panel.predictors("wave1", outcome="log_weight").columns) == ["sex", "sport"]
    assert list(panel.predictors("wave1", outcome="weight").columns) == ["sex", "sport"]
    assert list(panel.predictors("wave1", outcome="mood").columns) == ["weight", "log_weight", "sex", "sport"]


def test_transforms_equal_the_hand_computation():
    x = np.array([1.0, 4.0, np.nan, 9.0, 0.0, -2.0])
    waves = np.array([1, 1, 1, 2, 2, 2])
    log, bad = derive_values(x, waves, "log")
    np.testing.assert_array_equal(bad, [False, False, False, False, True, True])
    np.testing.assert_allclose(log[[0, 1, 3]], np.log([1.0, 4.0, 9.0]))
    assert np.isnan(log[[2, 4, 5]]).all()
    np.testing.assert_allclose(derive_values(x, waves, "log1p")[0][[0, 4]], np.log1p([1.0, 0.0]))
    assert derive_values(x, waves, "log1p")[1].tolist() == [False] * 5 + [True]
    np.testing.assert_allclose(derive_values(x, waves, "sqrt")[0][[0, 1, 3, 4]], [1, 2, 3, 0])
    z = derive_values(x, waves, "standardise_wave")[0]
    np.testing.assert_allclose(z[[0, 1]], [-1 / np.sqrt(2), 1 / np.sqrt(2)])  # (x - 2.5) / sd, sd = 2.1213
    a = x[np.isfinite(x)]
    np.testing.assert_allclose(derive_values(x, waves, "standardise_all")[0][np.isfinite(x)],
                               (a - a.mean()) / a.std(ddof=1))


def test_derived_variable_mistakes_name_the_line():
    with pytest.raises(CodebookError, match=r":9: variable log_weight is derived from 'wieght'.*"):
        try:
            parse_codebook(CODEBOOK.replace("derived_from: weight", "derived_from: wieght"), source="cb.yaml")
        except CodebookError as err:
            assert "did you mean 'weight'" in str(err)
            raise
    with pytest.raises(CodebookError, match="go together"):
        parse_codebook(CODEBOOK.replace(", transform: log", ""))
    with pytest.raises(CodebookError, match="not one of log, log1p, sqrt"):
        parse_codebook(CODEBOOK.replace("transform: log", "transform: exp"))


def test_time_invariant_variables_give_one_finding_not_one_per_wave():
    from wavetrail.checks import run_checks

    frame = panel_frame()  # sex and sport repeat on every row of a person (long file)
    findings = run_checks([frame], parse_codebook(CODEBOOK))
    rows = findings[findings["check"] == "unexpected_wave"]
    assert sorted(rows["variable"]) == ["sex", "sport"] and set(rows["severity"]) == {"info"}
    assert not (findings["severity"] == "error").any()
    changed = frame.copy()
    changed.loc[(changed["pid"] == 2) & (changed["wave"] == 3), "sport"] = 99.5
    f2 = run_checks([changed], parse_codebook(CODEBOOK))
    warn = f2[(f2["check"] == "unexpected_wave") & (f2["severity"] == "warning")]
    assert len(warn) == 1 and warn["variable"].iloc[0] == "sport" and "remove `waves:`" in warn["message"].iloc[0]
    # a wide file whose time-invariant column has no wave suffix and the codebook no `waves:`
    wide_cb = parse_codebook(textwrap.dedent("""\
        study: {id: pid, wide: "{name}_{wave}", waves: [1, 2, 3]}
        variables:
          - {name: pid, type: integer}
          - {name: weight, type: number}
          - {name: sex, type: category, levels: {1: girl, 2: boy}}
        """))
    wide = frame.pivot(index="pid", columns="wave", values="weight")
    wide.columns = [f"weight_{w}" for w in wide.columns]
    wide = wide.reset_index().assign(sex=frame.groupby("pid")["sex"].first().to_numpy())
    f3 = run_checks([wide], wide_cb)
    assert not (f3["severity"] == "error").any(), f3
    once = f3[f3["check"] == "measured_once"]
    assert len(once) == 1 and "add `waves: [1]`" in once["message"].iloc[0]


def test_score_step_refuses_a_bad_name_when_snakemake_is_run_directly(project):
    """`score_scales` repeats the name check, naming config.yaml and the line."""
    from wavetrail.config import load_config
    from wavetrail.stages.runner import Job
    from wavetrail.stages.scores import score_scales

    edit(project, "config/config.yaml", "outcomes: [weight]", "outcomes: [weight, mod]")
    config = load_config(project)
    findings = project / "results/checks/findings.csv"
    findings.write_text("variable,wave,check,severity,count,rows,message\n", encoding="utf-8")
    job = Job(step="score_scales", project=project,
              input={"data": ["data/raw/panel.csv"], "codebook": "config/codebook.yaml",
                     "findings": "results/checks/findings.csv"},
              output={"scores": "results/scores/scores.csv"}, params={}, config=config, wildcards={},
              log=None, seed=1)
    with pytest.raises(ConfigError, match=r"config/config.yaml, line 5: growth.outcomes\[1\] 'mod'.*'mood'"):
        score_scales(job)
    assert not (project / "results/scores/scores.csv").exists()
    edit(project, "config/config.yaml", "outcomes: [weight, mod]", "outcomes: [weight, mood]")
    job.config = load_config(project)
    score_scales(job)
    scores = pd.read_csv(project / "results/scores/scores.csv")
    assert list(pd.unique(scores["scale"])) == ["mood", "weight"]
    assert job.params["derived"] == {"log_weight": {"derived_from": "weight", "transform": "log"}}


def test_stand_in_data_leave_derived_variables_to_the_codebook():
    """A stand-in raw file holds the source, never the derived column, and passes the checks."""
    from wavetrail.archive.stand_in import synthesize
    from wavetrail.checks import run_checks

    cb = parse_codebook(CODEBOOK)
    made = synthesize(load_panel([panel_frame(n=60)], cb), seed=5)
    assert "weight" in made.frame.columns and "log_weight" not in made.frame.columns
    findings = run_checks([made.frame], cb)
    assert not (findings["severity"] == "error").any(), findings[findings["severity"] == "error"]
    again = load_panel([made.frame], cb).long
    np.testing.assert_allclose(again["log_weight"], np.log(again["weight"]))


def test_interaction_pair_with_the_outcomes_own_variable_is_refused():
    cb = parse_codebook(CODEBOOK)
    config = default_config()
    config["growth"]["outcomes"] = ["log_weight"]
    config["forest"]["interaction_pairs"] = [["sex", "weight"]]
    with pytest.raises(ConfigError, match=r"interaction_pairs\[0\] names 'weight'.*outcome's own raw variables"):
        check_names(config, cb, lines={("forest", "interaction_pairs", 0, 1): 14})
    config["forest"]["interaction_pairs"] = [["sex", "sport"]]
    assert check_names(config, cb) == (["log_weight"], "log_weight")
