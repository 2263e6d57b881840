"""Scaffolding: `new_project`, `find_project`, the template, the first commit."""

from __future__ import annotations

import hashlib
import json
from pathlib import Path

import git
import pytest
import yaml

from wavetrail.errors import DataError, ProjectError
from wavetrail.project import DEFAULT_AUTHOR, find_project, is_project, new_project
from wavetrail.resources import rules_dir, template_dir


def test_new_makes_a_project_with_one_commit_without_git_identity(tmp_path, no_git_identity):
    root = new_project(tmp_path / "my-panel", title="Sleep over adolescence")
    assert root == (tmp_path / "my-panel").resolve()
    assert is_project(root)
    with git.Repo(root) as repo:
        commits = list(repo.iter_commits())
        assert len(commits) == 1
        assert (commits[0].author.name, commits[0].author.email) == DEFAULT_AUTHOR
        assert (commits[0].committer.name, commits[0].committer.email) == DEFAULT_AUTHOR
        assert not repo.is_dirty(untracked_files=True)
        tracked = set(repo.git.ls_files().splitlines())
    # every rule module was copied in and committed
    modules = sorted(p.name for p in rules_dir().glob("*.smk"))
    assert modules == ["checks.smk", "common.smk", "forest.smk", "growth.smk", "provenance.smk",
                       "report.smk", "scores.smk"]
    for name in modules:
        assert f"workflow/rules/{name}" in tracked
    assert "workflow/rules/scripts/run_step.py" in tracked
    for path in ("workflow/Snakefile", "config/config.yaml", "config/codebook.yaml", "data/SHA256SUMS",
                 "workflow/profiles/default/config.yaml", "workflow/profiles/slurm/config.yaml", ".gitignore"):
        assert path in tracked, path
    assert "Sleep over adolescence" in (root / "README.md").read_text()
    # cookiecutter left nothing in the user's home (no replay file)
    assert list(no_git_identity.iterdir()) == []


def test_new_uses_author_for_the_commit(tmp_path, no_git_identity):
    root = new_project(tmp_path / "p", author="Ada Example <ada@example.org>")
    with git.Repo(root) as repo:
        head = repo.head.commit
        assert (head.author.name, head.author.email) == ("Ada Example", "ada@example.org")
        assert (head.committer.name, head.committer.email) == ("Ada Example", "ada@example.org")


def test_new_refuses_a_non_empty_folder_and_leaves_it_alone(tmp_path, no_git_identity):
    target = tmp_path / "busy"
    target.mkdir()
    (target / "notes.txt").write_text("keep me")
    with pytest.raises(ProjectError, match="not empty"):
        new_project(target)
    assert [p.name for p in target.iterdir()] == ["notes.txt"]
    assert (target / "notes.txt").read_text() == "keep me"


def test_new_accepts_an_empty_existing_folder(tmp_path, no_git_identity):
    target = tmp_path / "empty"
    target.mkdir()
    assert is_project(new_project(target))


def test_new_with_data_copies_registers_and_drafts(tmp_path, no_git_identity):
    src = tmp_path / "waves.csv"
    src.write_text("pid,wave,slp1\n1,1,3\n1,2,4\n2,1,-99\n2,2,2\n", encoding="utf-8")
    root = new_project(tmp_path / "p", data=[src])
    copied = root / "data" / "raw" / "waves.csv"
    assert copied.read_bytes() == src.read_bytes()
    digest = hashlib.sha256(src.read_bytes()).hexdigest()
    assert (root / "data" / "SHA256SUMS").read_text() == f"{digest}  raw/waves.csv\n"
    config = yaml.safe_load((root / "config" / "config.yaml").read_text())
    assert config["data"] == ["data/raw/waves.csv"]
    codebook = yaml.safe_load((root / "config" / "codebook.yaml").read_text())
    # the id and wave columns are found from the data and not drafted as variables
    assert codebook["study"]["id"] == "pid" and codebook["study"]["wave"] == "wave"
    assert [v["name"] for v in codebook["variables"]] == ["slp1"]
    assert codebook["study"]["waves"] == [1, 2]
    with git.Repo(root) as repo:
        tracked = set(repo.git.ls_files().splitlines())
    # raw data kept private by default: the hash is tracked, the raw file is not
    assert "data/SHA256SUMS" in tracked and "data/raw/waves.csv" not in tracked


def test_new_cli_takes_several_per_wave_files(tmp_path, no_git_identity):
    from wavetrail.cli import main
    from wavetrail.codebook import load_codebook
    from wavetrail.panel import load_panel

    w1, w2 = tmp_path / "wave1.csv", tmp_path / "wave2.csv"
    w1.write_text("pid,slp1,slp2\n1,3,4\n2,2,5\n3,1,1\n", encoding="utf-8")
    w2.write_text("pid,slp1,slp2\n1,4,4\n3,2,2\n", encoding="utf-8")
    assert main(["new", str(tmp_path / "p"), "--data", str(w1), "--data", str(w2)]) == 0
    root = tmp_path / "p"
    config = yaml.safe_load((root / "config" / "config.yaml").read_text())
    assert config["data"] == ["data/raw/wave1.csv", "data/raw/wave2.csv"]
    sums = (root / "data" / "SHA256SUMS").read_text().splitlines()
    assert sums == [f"{hashlib.sha256(f.read_bytes()).hexdigest()}  raw/{f.name}" for f in (w1, w2)]
    codebook = load_codebook(root / "config" / "codebook.yaml")
    assert list(codebook.study.waves) == [1, 2]  # one file per wave, in the order given
    panel = load_panel([root / "data" / "raw" / f.name for f in (w1, w2)], codebook)
    # 3 people at wave 1, 2 at wave 2; person 2 is absent at wave 2, not invented
    assert len(panel.long) == 5
    assert sorted(panel.long.loc[panel.long["wave"] == 2, "pid"].tolist()) == [1, 3]
    assert panel.long.loc[(panel.long["pid"] == 3) & (panel.long["wave"] == 2), "slp1"].item() == 2


def test_new_with_a_missing_data_file_writes_nothing(tmp_path, no_git_identity):
    with pytest.raises(DataError, match="does not exist"):
        new_project(tmp_path / "p", data=[tmp_path / "nope.csv"])
    assert not (tmp_path / "p").exists()


def test_gitignore_keeps_private_raw_data_out_and_says_how_to_track_it(tmp_path, no_git_identity):
    root = new_project(tmp_path / "p")
    text = (root / ".gitignore").read_text()
    assert "data/raw/" in text.splitlines()
    assert "kept private" in text and "shareable" in text and "!data/raw/" in text
    assert ".snakemake/" in text.splitlines()
    # the stored panel is a row-level copy of the raw data: out of git with them
    assert "results/checks/panel.parquet" in text.splitlines()


def test_find_project_walks_up_and_refuses_other_folders(tmp_path, no_git_identity):
    root = new_project(tmp_path / "p")
    assert find_project(root / "workflow" / "rules") == root
    assert find_project(root / "config" / "config.yaml") == root
    with pytest.raises(ProjectError, match="is not a wavetrail project"):
        find_project(tmp_path)
    with pytest.raises(ProjectError, match="does not exist"):
        find_project(tmp_path / "missing")


def test_template_does_not_render_notebooks_and_has_the_documented_keys():
    spec = json.loads((template_dir() / "cookiecutter.json").read_text())
    for key in ("project_slug", "title", "author", "year", "seed"):
        assert key in spec
    skip = spec["_copy_without_render"]
    assert "workflow/notebooks/*" in skip
    project = template_dir() / "{{cookiecutter.project_slug}}"
    assert (project / "workflow" / "Snakefile").is_file()
    assert (project / "workflow" / "profiles" / "default" / "config.yaml").is_file()
    assert (project / "workflow" / "profiles" / "slurm" / "config.yaml").is_file()


def test_rendered_settings_are_valid(tmp_path, no_git_identity):
    from wavetrail.config import load_config

    root = new_project(tmp_path / "p", seed=7)
    config = load_config(root)
    assert config["seed"] == 7
    assert config["data"] == ["data/raw/panel.csv"]
    assert config["forest"]["trees"] == 500 and config["forest"]["shards"] == 1
