"""No dead ends around pack: what pack asks for, build does (real Snakemake runs of the demo).

- After `wavetrail plan freeze` (which commits the plan), pack names `wavetrail build`, and
  after that build (which reruns the report, the one step that shows the plan) pack works.
- A hand-edited result is rebuilt by `wavetrail build` (its job reruns), byte for byte.
- `wavetrail build -- --dry-run` works without a path and says it built nothing.
"""

from __future__ import annotations

import re

import pytest

from wavetrail.archive import pack_project, verify_archive
from wavetrail.build import build_project
from wavetrail.cli import main
from wavetrail.errors import ArchiveError
from wavetrail.plan import freeze_plan
from wavetrail.project import make_demo

pytestmark = pytest.mark.slow


@pytest.fixture(scope="module")
def built(tmp_path_factory):
    root = make_demo(tmp_path_factory.mktemp("deadends") / "demo", trees=8)
    text = (root / "config/config.yaml").read_text()
    text, n = re.subn(r"(?m)^(  enabled:) *\S+", r"\g<1> false", text, count=1)
    assert n == 1
    (root / "config/config.yaml").write_text(text)
    import git

    repo = git.Repo(root)
    repo.git.add("-A")
    repo.index.commit("no forest for this test")
    build_project(root, cores=2)
    return root


def test_plan_freeze_then_pack(built, tmp_path, monkeypatch, capsys):
    root = built
    freeze_plan(root)  # commits config/plan.lock.json
    with pytest.raises(ArchiveError) as err:
        pack_project(root, raw="exclude", output=tmp_path / "a.zip")
    text = str(err.value)
    assert "config/plan.lock.json" in text and "render_report" in text
    assert "run `wavetrail build`" in text
    # the dry run names the rerun without building anything, and works without a path
    monkeypatch.chdir(root)
    assert main(["build", "--", "--dry-run"]) == 0
    out = capsys.readouterr().out
    assert "dry run: nothing was built" in out and "render_report" in out
    assert "built " not in out
    result = build_project(root, cores=2)
    assert result.jobs == ["render_report"], result.jobs
    assert any("config/plan.lock.json" in f for f in result.forced)
    archive = pack_project(root, raw="exclude", output=tmp_path / "b.zip")
    assert verify_archive(archive).ok
    assert build_project(root, cores=2).up_to_date


def test_hand_edited_result_is_rebuilt(built, tmp_path):
    root = built
    fit = root / "results/growth/fit.csv"
    original = fit.read_bytes()
    fit.write_bytes(original.replace(b"linear", b"lineal", 1))
    with pytest.raises(ArchiveError, match="bytes differ from its ledger record"):
        pack_project(root, raw="exclude", output=tmp_path / "c.zip")
    result = build_project(root, cores=2)
    assert "fit_growth" in result.jobs and "render_report" in result.jobs
    assert fit.read_bytes() == original
    assert pack_project(root, raw="exclude", output=tmp_path / "d.zip").is_file()


def test_unlock_after_double_dash_works_without_a_path(built, monkeypatch, capsys):
    monkeypatch.chdir(built)
    assert main(["build", "--", "--unlock"]) == 0
    assert "does not exist" not in capsys.readouterr().err
