"""Analysis plan: freeze config + codebook, list every later change key by key."""

import json

import git
import pandas as pd
import pytest

from wavetrail.cli import main
from wavetrail.errors import ConfigError, ProjectError
from wavetrail.plan import diff_structures, freeze_plan, plan_changes, read_plan

CONFIG = """\
data: [data/raw/panel.csv]   # the raw file
codebook: config/codebook.yaml
seed: 20261202
growth: {outcomes: [sleep_difficulty], shapes: [linear, quadratic], residuals: free}
forest:
  outcome: sleep_difficulty
  trees: 500
"""

CODEBOOK = """\
study: {id: pid, wave: wave, waves: [1, 2, 3], time_scores: [0, 1, 2]}
variables:
  - {name: pid, type: integer}
  - name: slp1
    type: integer
    range: [1, 5]
    missing: {-99: refused}
    scale: sleep_difficulty
  - {name: slp4, type: integer, range: [1, 5], scale: sleep_difficulty}
scales:
  sleep_difficulty: {label: Sleep difficulty, min_share: 0.8}
"""


def make_project(root):
    (root / "config").mkdir(parents=True)
    (root / "config/config.yaml").write_text(CONFIG)
    (root / "config/codebook.yaml").write_text(CODEBOOK)
    return root


def test_freeze_records_hashes_and_structures(tmp_path):
    p = make_project(tmp_path / "p")
    line = freeze_plan(p)
    assert line.startswith("analysis plan frozen in config/plan.lock.json: config/config.yaml sha256 ")
    plan = read_plan(p)
    assert set(plan["files"]) == {"config/config.yaml", "config/codebook.yaml"}
    import hashlib

    assert plan["files"]["config/config.yaml"]["sha256"] == hashlib.sha256(CONFIG.encode()).hexdigest()
    assert plan["files"]["config/codebook.yaml"]["content"]["variables"][1]["missing"] == {"-99": "refused"}
    assert plan["git"] == {"commit": None, "dirty": None}
    assert plan_changes(p).empty


def test_every_later_change_is_listed_by_key(tmp_path):
    p = make_project(tmp_path / "p")
    freeze_plan(p)
    (p / "config/config.yaml").write_text(
        CONFIG.replace("shapes: [linear, quadratic]", "shapes: [linear]").replace("trees: 500", "trees: 50")
        + "report: {min_cell: 5}\n")
    (p / "config/codebook.yaml").write_text(
        CODEBOOK.replace("scale: sleep_difficulty}", "scale: sleep_difficulty, reverse: true}")
        .replace("  - {name: pid, type: integer}\n", "").replace("min_share: 0.8", "min_share: 0.75"))
    changes = plan_changes(p)
    got = {(r.file, r.key, r.change, r.frozen, r.current) for r in changes.itertuples()}
    assert got == {
        ("config/config.yaml", "growth.shapes", "changed", '["linear", "quadratic"]', '["linear"]'),
        ("config/config.yaml", "forest.trees", "changed", "500", "50"),
        ("config/config.yaml", "report", "added", None, '{"min_cell": 5}'),
        ("config/codebook.yaml", "variables[pid]", "removed", '{"name": "pid", "type": "integer"}', None),
        ("config/codebook.yaml", "variables[slp4].reverse", "added", None, "true"),
        ("config/codebook.yaml", "scales.sleep_difficulty.min_share", "changed", "0.8", "0.75"),
    }
    assert list(changes.columns) == ["file", "key", "change", "frozen", "current"]


def test_comment_only_edit_is_reported_as_reformatted(tmp_path):
    p = make_project(tmp_path / "p")
    freeze_plan(p)
    (p / "config/config.yaml").write_text(CONFIG.replace("# the raw file", "# raw data, kept private"))
    changes = plan_changes(p)
    assert changes[["file", "key", "change"]].values.tolist() == [["config/config.yaml", "", "reformatted"]]


def test_switching_the_codebook_file_is_a_deviation(tmp_path):
    p = make_project(tmp_path / "p")
    freeze_plan(p)
    (p / "config/other.yaml").write_text(CODEBOOK)
    (p / "config/config.yaml").write_text(CONFIG.replace("config/codebook.yaml", "config/other.yaml"))
    changes = plan_changes(p)
    assert set(zip(changes["file"], changes["change"])) == {
        ("config/config.yaml", "changed"), ("config/codebook.yaml", "file removed"), ("config/other.yaml", "file added")}
    assert changes.loc[changes["change"] == "changed", "key"].item() == "codebook"


def test_second_freeze_is_refused_unless_replaced(tmp_path):
    p = make_project(tmp_path / "p")
    freeze_plan(p)
    (p / "config/config.yaml").write_text(CONFIG.replace("trees: 500", "trees: 5"))
    with pytest.raises(ProjectError, match="already frozen"):
        freeze_plan(p)
    assert len(plan_changes(p)) == 1
    freeze_plan(p, replace=True)
    assert plan_changes(p).empty


def test_not_frozen_and_bad_yaml(tmp_path):
    p = make_project(tmp_path / "p")
    with pytest.raises(ProjectError, match="has not been frozen"):
        plan_changes(p)
    assert plan_changes(p, missing_ok=True)["change"].tolist() == ["not frozen"]
    freeze_plan(p)
    (p / "config/codebook.yaml").write_text("variables: [\n  - {name: x\n")
    with pytest.raises(ConfigError, match=r"config/codebook.yaml, line \d+"):
        plan_changes(p)


def test_diff_structures_positions_and_types():
    assert diff_structures({"a": [{"x": 1}, {"x": 2}]}, {"a": [{"x": 1}, {"x": 3}, {"x": 4}]}) == [
        ("a[1].x", "changed", 2, 3), ("a[2]", "added", diff_structures.__globals__["_ABSENT"], {"x": 4})]
    assert diff_structures({"k": 1}, {"k": 1.0}) == [("k", "changed", 1, 1.0)]  # type change counts
    assert diff_structures([1, 2], [1, 2]) == []


def test_freeze_commits_the_plan_in_git(tmp_path, monkeypatch):
    p = make_project(tmp_path / "p")
    repo = git.Repo.init(p)
    repo.git.add(A=True)
    repo.git.commit("-m", "start", "--author", "t <t@example.org>")
    monkeypatch.chdir(p)
    assert main(["plan", "freeze"]) == 0
    assert repo.head.commit.message.startswith("Freeze the analysis plan")
    assert sorted(repo.head.commit.stats.files) == ["config/plan.lock.json"]
    plan = json.loads((p / "config/plan.lock.json").read_text())
    assert plan["git"]["commit"] == repo.head.commit.parents[0].hexsha
    assert main(["plan", "freeze"]) == 1
    assert main(["plan", "freeze", "--replace"]) == 0
    assert main(["plan", "diff"]) == 0
    assert isinstance(plan_changes(p), pd.DataFrame)


def test_freezing_after_results_is_recorded(tmp_path):
    p = make_project(tmp_path / "p")
    (p / "results/ledger").mkdir(parents=True)
    base = {"schema": "wavetrail-ledger/1", "wildcards": {}, "inputs": [], "outputs": [], "params": {},
            "seed": 1, "started": "t", "finished": "t", "python": "x", "platform": "x", "packages": {},
            "lock_sha256": None, "git": {"commit": None, "dirty": None}, "wavetrail": "0"}
    (p / "results/ledger/check_data.json").write_text(json.dumps(dict(base, step="check_data")))
    assert "note" not in freeze_plan(p)
    assert read_plan(p)["results_seen"] == []
    (p / "results/ledger/fit_growth.json").write_text(json.dumps(dict(base, step="fit_growth")))
    line = freeze_plan(p, replace=True)
    assert "note: results of fit_growth already existed" in line
    assert read_plan(p)["results_seen"] == ["fit_growth"]
