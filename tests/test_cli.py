"""The real command line on bad input: one clear message, exit 1 or 2, never a traceback."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import git
import pytest

from wavetrail.cli import main
from wavetrail.project import make_demo, new_project


def run(args, cwd=None):
    """Run `wavetrail ARGS` in a fresh interpreter (what a user's shell does)."""
    return subprocess.run([sys.executable, "-m", "wavetrail.cli", *args], capture_output=True, text=True, cwd=cwd)


def _no_traceback(proc):
    assert "Traceback" not in proc.stdout + proc.stderr


def test_new_then_refuse_non_empty(tmp_path, bare_git, capsys):
    assert main(["new", str(tmp_path / "p"), "--title", "Test panel"]) == 0
    out = " ".join(capsys.readouterr().out.split())
    assert "created project" in out
    assert "no --author was given" in out  # says which identity the first commit used
    with git.Repo(tmp_path / "p") as repo:
        assert len(list(repo.iter_commits())) == 1
    assert main(["new", str(tmp_path / "p")]) == 1
    err = capsys.readouterr().err
    assert "is not empty" in err


def test_missing_data_file(tmp_path, bare_git):
    root = new_project(tmp_path / "p")
    proc = run(["build", str(root)])
    assert proc.returncode == 1
    assert "data file data/raw/panel.csv does not exist" in proc.stderr
    assert "config/config.yaml, line" in proc.stderr
    _no_traceback(proc)
    proc = run(["new", str(tmp_path / "q"), "--data", str(tmp_path / "absent.csv")])
    assert proc.returncode == 1 and "absent.csv does not exist" in proc.stderr
    _no_traceback(proc)


def test_malformed_yaml_names_file_and_line(tmp_path, bare_git):
    root = new_project(tmp_path / "p")
    cfg = root / "config" / "config.yaml"
    cfg.write_text("data: [data/raw/panel.csv]\nforest:\n  trees: 10\n\tshards: 2\n")
    for command in (["build", str(root)], ["check", str(root)]):
        proc = run(command)
        assert proc.returncode == 1, command
        assert "config/config.yaml, line 4" in proc.stderr
        _no_traceback(proc)


def test_unknown_config_key_is_named(tmp_path, bare_git):
    root = make_demo(tmp_path / "demo")
    cfg = root / "config" / "config.yaml"
    cfg.write_text(cfg.read_text().replace("  trees:", "  tress:"))
    proc = run(["build", str(root)])
    assert proc.returncode == 1
    assert "unknown key 'forest.tress'" in proc.stderr
    assert "did you mean 'forest.trees'" in proc.stderr
    _no_traceback(proc)


def test_not_a_project(tmp_path):
    for command in (["build", str(tmp_path)], ["check", str(tmp_path)]):
        proc = run(command)
        assert proc.returncode == 1
        assert "is not a wavetrail project" in proc.stderr
        _no_traceback(proc)


def test_bad_usage_exits_2(tmp_path):
    proc = run(["build", str(tmp_path), "--cores", "many"])
    assert proc.returncode == 2
    _no_traceback(proc)


def test_unknown_profile_exits_2(tmp_path, bare_git):
    root = make_demo(tmp_path / "demo")
    proc = run(["build", str(root), "--profile", "nowhere"])
    assert proc.returncode == 2
    assert "no profile 'nowhere'" in proc.stderr
    _no_traceback(proc)


def test_check_on_the_demo_warns_without_errors(tmp_path, bare_git):
    root = make_demo(tmp_path / "demo")
    proc = run(["check"], cwd=root)
    assert proc.returncode == 0, proc.stderr
    assert ", 0 errors" in proc.stdout
    assert "warning" in proc.stdout
    _no_traceback(proc)


def test_extra_arguments_reach_snakemake(tmp_path, bare_git):
    root = make_demo(tmp_path / "demo")
    proc = run(["build", str(root), "--", "--dry-run"])
    assert proc.returncode == 0, proc.stderr
    assert "render_report" in proc.stdout
    assert not (root / "results" / "checks" / "findings.csv").exists()
