"""Fixtures shared by several test files."""

import pytest


@pytest.fixture
def bare_git(tmp_path, monkeypatch):
    home = tmp_path / "home"
    home.mkdir()
    monkeypatch.setenv("HOME", str(home))
    monkeypatch.setenv("GIT_CONFIG_GLOBAL", str(home / "no-gitconfig"))
    monkeypatch.setenv("GIT_CONFIG_NOSYSTEM", "1")
    return home


@pytest.fixture
def no_git_identity(bare_git, monkeypatch):
    """A new user's machine: `bare_git`, and no git identity in the environment either."""
    for var in ("GIT_AUTHOR_NAME", "GIT_AUTHOR_EMAIL", "GIT_COMMITTER_NAME", "GIT_COMMITTER_EMAIL", "EMAIL"):
        monkeypatch.delenv(var, raising=False)
    return bare_git


def pytest_collection_modifyitems(config, items):
    """Files with slow end-to-end tests first (order within a file kept): the two workers
    take them at the start, and the quick files fill the gaps instead of one worker running
    the slowest files alone at the end."""
    slow_files = {item.nodeid.split("::")[0] for item in items if item.get_closest_marker("slow")}
    items.sort(key=lambda item: item.nodeid.split("::")[0] not in slow_files)
