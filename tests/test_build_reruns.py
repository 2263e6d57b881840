"""What `wavetrail build` reruns besides what Snakemake sees (ledger.source_changes / rerun_targets)."""

from __future__ import annotations

import json

from test_archive_helpers import make_project
from wavetrail import ledger
from wavetrail._io import write_json


def _with_sources(root):
    """Give every record of the hand-built project the sources as they are now (as a fresh build would)."""
    now = ledger.source_files(root)
    for path in (root / ledger.LEDGER_DIR).glob("*.json"):
        rec = json.loads(path.read_text())
        rec["sources"] = now
        write_json(path, rec)


def _render_record(root):
    rec = json.loads((root / ledger.LEDGER_DIR / "describe--outcome=sd.json").read_text())
    rec["step"] = "render_report"
    write_json(root / ledger.LEDGER_DIR / "render_report.json", {**rec, "outputs": []})


def test_sources_are_recorded_without_caches(tmp_path):
    root = make_project(tmp_path / "p", n=40, email=False)
    (root / "workflow/__pycache__").mkdir()
    (root / "workflow/__pycache__/x.pyc").write_bytes(b"0")
    (root / "config/.hidden.tmp").write_text("x")
    assert sorted(ledger.source_files(root)) == ["config/codebook.yaml", "config/config.yaml", "workflow/Snakefile"]


def test_which_source_changes_rerun_which_steps(tmp_path):
    root = make_project(tmp_path / "p", n=40, email=False)
    _render_record(root)
    _with_sources(root)
    assert ledger.rerun_targets(root) == []
    # the plan: only the report shows it
    (root / "config/plan.lock.json").write_text("{}")
    assert ledger.rerun_targets(root) == [("render_report", "config/plan.lock.json changed since it ran")]
    _with_sources(root)
    # a profile: how jobs run, not what they compute
    (root / "workflow/profiles/default").mkdir(parents=True)
    (root / "workflow/profiles/default/config.yaml").write_text("cores: 2\n")
    assert ledger.rerun_targets(root) == []
    # the codebook is a declared input of score_scales: judged by input hashes (Snakemake sees it), not here
    cb = root / "config/codebook.yaml"
    cb.write_text(cb.read_text() + "# note\n")
    assert ledger.rerun_targets(root) == []
    # the settings and the workflow code count for every step
    cfg = root / "config/config.yaml"
    cfg.write_text(cfg.read_text().replace("seed: 20261202", "seed: 7"))
    steps = [s for s, _ in ledger.rerun_targets(root)]
    assert steps == sorted(["describe", "lock_environment", "render_report", "score_scales", "confirm_raw_hashes",
                            "check_data"])


def test_hand_edited_output_reruns_its_step(tmp_path):
    root = make_project(tmp_path / "p", n=40, email=False)
    _with_sources(root)
    fit = root / "results/growth/fit.csv"
    fit.write_text(fit.read_text().replace("linear", "lineal"))
    assert ledger.rerun_targets(root) == [("describe", "results/growth/fit.csv: bytes differ from its ledger record")]


def test_records_without_sources_fall_back_on_the_commit(tmp_path):
    import git

    root = make_project(tmp_path / "p", n=40, email=False)
    repo = git.Repo(root)
    commit = repo.head.commit.hexsha
    for path in (root / ledger.LEDGER_DIR).glob("*.json"):  # as a build at that commit would record
        rec = json.loads(path.read_text())
        rec["git"] = {"commit": commit, "dirty": False}
        write_json(path, rec)
    (root / "config/plan.lock.json").write_text("{}")
    repo.git.add("config/plan.lock.json")
    with repo.git.custom_environment(GIT_AUTHOR_NAME="t", GIT_AUTHOR_EMAIL="t@x", GIT_COMMITTER_NAME="t",
                                     GIT_COMMITTER_EMAIL="t@x"):
        repo.git.commit("-q", "-m", "plan", "--no-gpg-sign")
    assert ledger.rerun_targets(root, repo) == []  # no report step recorded: the plan matters to none
    cfg = root / "config/config.yaml"
    cfg.write_text(cfg.read_text() + "# comment\n")
    repo.git.add("-A")
    with repo.git.custom_environment(GIT_AUTHOR_NAME="t", GIT_AUTHOR_EMAIL="t@x", GIT_COMMITTER_NAME="t",
                                     GIT_COMMITTER_EMAIL="t@x"):
        repo.git.commit("-q", "-m", "settings", "--no-gpg-sign")
    changes = ledger.source_changes(root, ledger.read_records(root), repo)
    assert set(changes) == {f"results/ledger/{n}.json" for n in
                            ("describe--outcome=sd", "lock_environment", "score_scales", "confirm_raw_hashes",
                             "check_data")}
    assert all(v == ["config/config.yaml"] for v in changes.values())
