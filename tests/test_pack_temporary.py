"""Packing leaves temporary files out: a killed job's *.tmp and unfinished atomic writes."""

from __future__ import annotations

import zipfile

import pytest

from test_archive_helpers import make_project
from wavetrail._io import atomic_write_bytes
from wavetrail.archive import pack_project, verify_archive
from wavetrail.archive.pack import is_temporary


@pytest.mark.parametrize("rel, expected", [
    ("results/scores/scores.csv", False),
    ("results/scores/scores.csv.tmp", True),
    ("results/checks/.findings.csv.k3j_x9a.tmp", True),
    ("results/tmp/table.csv", False),            # a folder called tmp is not a temporary file
    ("results/growth/fit.tmp.csv", False),
    ("config/config.yaml", False),
])
def test_temporary_names(rel, expected):
    assert is_temporary(rel) is expected


def test_the_atomic_writer_temp_name_is_recognised(tmp_path, monkeypatch):
    """The name pattern is the one wavetrail._io really uses (seen by stopping a write half-way)."""
    import os

    seen = []
    real_replace = os.replace

    def spy(src, dst):
        seen.append(os.path.basename(src))
        return real_replace(src, dst)

    monkeypatch.setattr(os, "replace", spy)
    atomic_write_bytes(tmp_path / "findings.csv", b"x\n")
    assert len(seen) == 1 and seen[0] != "findings.csv"
    assert is_temporary(f"results/checks/{seen[0]}")


def test_pack_skips_leftover_temporary_files(tmp_path):
    root = make_project(tmp_path / "proj", n=120, email=False)
    (root / "results/scores/leftover.csv.tmp").write_text("id,wave\n1,")          # a killed job's leftover
    (root / "results/growth/.fit.csv.a1b2c3d4.tmp").write_text("parameter,est")   # an unfinished atomic write
    archive = pack_project(root, raw="exclude", output=tmp_path / "out.zip")
    with zipfile.ZipFile(archive) as zf:
        names = zf.namelist()
    assert not [n for n in names if n.endswith(".tmp")]
    assert any(n.endswith("data/results/growth/fit.csv") for n in names)
    assert verify_archive(archive).ok
