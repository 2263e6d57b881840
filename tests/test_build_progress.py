"""The console of `wavetrail build` shows a long forest moving: a shard's own progress
lines are forwarded at each quarter of its trees, never one line per tree."""

from __future__ import annotations

import sys
import types

from wavetrail.build import _run


def test_forest_progress_is_forwarded_by_quarters(tmp_path):
    lines = [f"forest shard 2 of 3: {d} of 40 trees grown" for d in range(2, 41, 2)]
    script = "\n".join(f"print({line!r})" for line in lines)
    shown: list[str] = []
    result = _run(tmp_path, [sys.executable, "-c", script], env=None, log_path=tmp_path / "build.log",
                  progress=shown.append, guard=types.SimpleNamespace(fds=()))
    assert result.returncode == 0
    trees = [line.split(":", 1)[1].strip() for line in shown if "forest shard 2 of 3" in line]
    assert trees == ["10 of 40 trees grown", "20 of 40 trees grown", "30 of 40 trees grown",
                     "40 of 40 trees grown"]
    # every line still reaches the build log
    assert (tmp_path / "build.log").read_text().count("trees grown") == 20
