"""`wavetrail build` lifts the Snakemake lock a killed build left, and only that one."""

from __future__ import annotations

import os

import pytest

from wavetrail.build import GUARD_FILE, build_project
from wavetrail.errors import BuildError
from wavetrail.project import make_demo

fcntl = pytest.importorskip("fcntl")

TARGET = "results/checks/data_registry.csv"  # the first job: keeps these builds short


@pytest.fixture
def demo(tmp_path):
    return make_demo(tmp_path / "demo", trees=4)


def _leave_lock(root) -> None:
    """The lock files Snakemake writes while it runs (and leaves when it is killed)."""
    locks = root / ".snakemake" / "locks"
    locks.mkdir(parents=True, exist_ok=True)
    (locks / "0.output.lock").write_text(f"{TARGET}\n{(root / TARGET).resolve()}\n")


def test_a_lock_with_no_build_behind_it_is_lifted(demo):
    _leave_lock(demo)
    (demo / GUARD_FILE).write_text("running 123456\n")  # a killed build never wrote "done"
    lines: list[str] = []
    result = build_project(demo, cores=1, extra=[TARGET], progress=lines.append)
    assert result.jobs == ["confirm_raw_hashes"]
    assert (demo / TARGET).is_file()
    assert any("killed (pid 123456)" in line for line in lines), lines
    locks = demo / ".snakemake" / "locks"
    assert not locks.is_dir() or not any(locks.iterdir())
    assert (demo / GUARD_FILE).read_text() == "done\n"


def test_a_lock_of_a_run_wavetrail_did_not_start_is_left_alone(demo):
    _leave_lock(demo)  # e.g. someone ran snakemake by hand: we cannot tell it ended
    with pytest.raises(BuildError, match=r"wavetrail build -- --unlock"):
        build_project(demo, cores=1, extra=[TARGET])
    assert (demo / ".snakemake" / "locks" / "0.output.lock").is_file()
    assert not (demo / TARGET).exists()


def test_a_second_build_of_the_same_folder_is_refused_while_one_runs(demo):
    guard = demo / GUARD_FILE
    guard.parent.mkdir(parents=True, exist_ok=True)
    guard.write_text("running 4242\n")
    fd = os.open(guard, os.O_RDWR)
    try:
        fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)  # a build that is still running holds this
        with pytest.raises(BuildError, match=r"another `wavetrail build` of this project is running \(pid 4242\)"):
            build_project(demo, cores=1, extra=[TARGET])
    finally:
        os.close(fd)
    assert not (demo / TARGET).exists()
    build_project(demo, cores=1, extra=[TARGET])  # once it has ended, building works
    assert (demo / TARGET).is_file()
