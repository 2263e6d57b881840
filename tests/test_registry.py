"""Data registry: data/SHA256SUMS in sha256sum format, refusal on changed bytes, git commits."""

import hashlib
import shutil
import subprocess

import git
import pytest

from wavetrail.cli import main
from wavetrail.errors import RegistryError
from wavetrail.registry import (
    read_registry,
    register_files,
    registry_status,
    verify_registered,
)
from wavetrail.stages.provenance import confirm_raw_hashes
from wavetrail.stages.runner import Job

PANEL = "pid,wave,slp1\n1,1,3\n1,2,4\n2,1,-99\n"


def make_project(root):
    (root / "data" / "raw").mkdir(parents=True)
    (root / "config").mkdir()
    (root / "data" / "raw" / "panel.csv").write_text(PANEL)
    (root / "config" / "config.yaml").write_text("data: [data/raw/panel.csv]\ncodebook: config/codebook.yaml\nseed: 1\n")
    return root


def test_register_writes_sha256sum_format(tmp_path, monkeypatch):
    project = make_project(tmp_path / "p")
    monkeypatch.chdir(project)
    lines = register_files(project, ["data/raw/panel.csv"])
    digest = hashlib.sha256(PANEL.encode()).hexdigest()
    assert lines == [f"registered data/raw/panel.csv  sha256 {digest}  ({len(PANEL)} bytes)"]
    assert (project / "data" / "SHA256SUMS").read_text() == f"{digest}  raw/panel.csv\n"
    assert read_registry(project) == {"data/raw/panel.csv": digest}
    # the registry checks with the standard tool, without wavetrail
    if shutil.which("sha256sum"):
        done = subprocess.run(["sha256sum", "-c", "SHA256SUMS"], cwd=project / "data", capture_output=True, text=True)
        assert done.returncode == 0, done.stdout + done.stderr
        assert "raw/panel.csv: OK" in done.stdout
    # registering again changes nothing
    assert register_files(project, ["data/raw/panel.csv"]) == [f"unchanged  data/raw/panel.csv  sha256 {digest}"]


def test_changed_byte_is_refused_with_both_hashes_and_the_command(tmp_path):
    project = make_project(tmp_path / "p")
    register_files(project, [project / "data/raw/panel.csv"])
    old = hashlib.sha256(PANEL.encode()).hexdigest()
    changed = PANEL.replace("3\n", "5\n", 1)
    (project / "data/raw/panel.csv").write_text(changed)
    new = hashlib.sha256(changed.encode()).hexdigest()
    with pytest.raises(RegistryError) as info:
        verify_registered(project, ["data/raw/panel.csv"])
    text = str(info.value)
    assert "data/raw/panel.csv" in text
    assert f"expected sha256 {old}" in text and f"actual   sha256 {new}" in text
    assert "wavetrail data register data/raw/panel.csv" in text
    lines = register_files(project, [project / "data/raw/panel.csv"])
    assert lines == [f"updated    data/raw/panel.csv  sha256 {old} -> {new}  ({len(changed)} bytes)"]
    table = verify_registered(project, ["data/raw/panel.csv"])
    assert table.to_dict("records") == [{"file": "data/raw/panel.csv", "sha256": new, "size": len(changed), "state": "ok"}]


def test_unregistered_and_missing_files_are_refused(tmp_path):
    project = make_project(tmp_path / "p")
    (project / "data/raw/wave2.csv").write_text("pid\n1\n")
    register_files(project, [project / "data/raw/panel.csv"])
    with pytest.raises(RegistryError, match=r"wave2.csv: not registered.*") as info:
        verify_registered(project, ["data/raw/panel.csv", "data/raw/wave2.csv"])
    assert "wavetrail data register data/raw/wave2.csv" in str(info.value)
    (project / "data/raw/panel.csv").unlink()
    with pytest.raises(RegistryError, match="panel.csv: file is missing"):
        verify_registered(project, ["data/raw/panel.csv"])


def test_malformed_registry_names_the_line(tmp_path):
    project = make_project(tmp_path / "p")
    (project / "data/SHA256SUMS").write_text("0" * 64 + "  raw/panel.csv\nnot a hash line\n")
    with pytest.raises(RegistryError, match="line 2"):
        read_registry(project)
    (project / "data/SHA256SUMS").write_text("0" * 64 + "  ../outside.csv\n")
    with pytest.raises(RegistryError, match="leaves data/"):
        read_registry(project)


def test_file_outside_the_data_folder_is_refused(tmp_path):
    project = make_project(tmp_path / "p")
    stray = tmp_path / "elsewhere.csv"
    stray.write_text("x\n")
    with pytest.raises(RegistryError, match="not inside the project"):
        register_files(project, [stray])
    with pytest.raises(RegistryError, match="not a data file under data/"):
        register_files(project, [project / "config/config.yaml"])


def test_status_states(tmp_path):
    project = make_project(tmp_path / "p")
    (project / "data/raw/b.csv").write_text("b\n")
    (project / "data/raw/c.csv").write_text("c\n")
    register_files(project, [project / "data/raw/panel.csv", project / "data/raw/b.csv", project / "data/raw/c.csv"])
    (project / "data/raw/b.csv").write_text("B\n")
    (project / "data/raw/c.csv").unlink()
    (project / "data/raw/d.csv").write_text("d\n")
    status = registry_status(project)
    assert list(status.columns) == ["file", "state", "sha256", "actual_sha256", "size"]
    assert dict(zip(status["file"], status["state"])) == {
        "data/raw/b.csv": "changed", "data/raw/c.csv": "missing",
        "data/raw/d.csv": "unregistered", "data/raw/panel.csv": "ok"}
    assert status.loc[status["file"] == "data/raw/panel.csv", "size"].item() == len(PANEL)


def test_confirm_raw_hashes_step_writes_the_registry_table(tmp_path):
    project = make_project(tmp_path / "p")
    register_files(project, [project / "data/raw/panel.csv"])
    job = Job(step="confirm_raw_hashes", project=project,
              input={"data": ["data/raw/panel.csv"], "registry": "data/SHA256SUMS"},
              output={"registry": "results/checks/data_registry.csv"})
    confirm_raw_hashes(job)
    digest = hashlib.sha256(PANEL.encode()).hexdigest()
    assert (project / "results/checks/data_registry.csv").read_text() == (
        f"file,sha256,size,state\ndata/raw/panel.csv,{digest},{len(PANEL)},ok\n")
    (project / "data/raw/panel.csv").write_bytes(PANEL.encode()[:-1] + b"9")
    with pytest.raises(RegistryError):
        confirm_raw_hashes(job)


def test_add_commits_only_the_registry_with_a_neutral_author(tmp_path, no_git_identity):
    project = make_project(tmp_path / "p")
    repo = git.Repo.init(project)
    (project / "notes.txt").write_text("staged but not ours to commit\n")
    repo.git.add("notes.txt")
    lines = register_files(project, [project / "data/raw/panel.csv"])
    assert lines[-1].startswith("committed  data/SHA256SUMS (")
    head = repo.head.commit
    assert head.author.name == "wavetrail" and head.author.email == "wavetrail@localhost"
    assert sorted(head.stats.files) == ["data/SHA256SUMS"]
    # the user's staged file stays staged, uncommitted
    assert "notes.txt" in repo.git.diff("--cached", "--name-only")
    # a second registration of unchanged bytes makes no commit
    register_files(project, [project / "data/raw/panel.csv"])
    assert repo.head.commit == head
    (project / "data/raw/panel.csv").write_text(PANEL + "3,1,2\n")
    register_files(project, [project / "data/raw/panel.csv"])
    assert repo.head.commit.parents[0] == head


def test_cli_data_add_and_status(tmp_path, monkeypatch, capsys):
    project = make_project(tmp_path / "p")
    monkeypatch.chdir(project)
    assert main(["data", "compare"]) == 1  # unregistered
    assert main(["data", "register", "data/raw/panel.csv"]) == 0
    assert main(["data", "compare"]) == 0
    (project / "data/raw/panel.csv").write_text(PANEL + "9,9,9\n")
    assert main(["data", "compare"]) == 1
    out = capsys.readouterr().out
    assert "changed" in out
    assert main(["data", "register", "missing.csv"]) == 1
    assert "no such data file" in capsys.readouterr().err
