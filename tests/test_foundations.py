"""Foundations: seeds, atomic writes, byte-stable tables, the public error tree."""

import os

import numpy as np
import pandas as pd
import pytest

import wavetrail
from wavetrail import _io
from wavetrail.seeds import derive_seed, generator


def test_seeds_depend_on_name_not_order():
    a = [derive_seed(7, "grow_forest", i) for i in range(5)]
    b = [derive_seed(7, "grow_forest", i) for i in reversed(range(5))][::-1]
    assert a == b
    assert len(set(a)) == 5
    assert derive_seed(7, "fit_growth") != derive_seed(8, "fit_growth")
    assert derive_seed(7, "fit_growth") != derive_seed(7, "grow_forest")
    x = generator(7, "tree", 3).normal(size=3)
    y = generator(7, "tree", 3).normal(size=3)
    np.testing.assert_array_equal(x, y)


def test_atomic_write_leaves_no_partial_file(tmp_path, monkeypatch):
    target = tmp_path / "t.csv"
    _io.atomic_write_text(target, "old\n")

    def boom(fd):
        raise OSError("disk full")

    monkeypatch.setattr(os, "fsync", boom)
    with pytest.raises(OSError):
        _io.atomic_write_text(target, "new content\n")
    assert target.read_text() == "old\n"
    assert [p.name for p in tmp_path.iterdir()] == ["t.csv"]


def test_tables_are_byte_stable(tmp_path):
    df = pd.DataFrame({"a": [1.0 / 3.0, 2.5], "b": ["x", "y"]})
    _io.write_table(tmp_path / "a.csv", df)
    _io.write_table(tmp_path / "b.csv", df.copy())
    assert (tmp_path / "a.csv").read_bytes() == (tmp_path / "b.csv").read_bytes()
    assert (tmp_path / "a.csv").read_text().splitlines()[1] == "0.3333333333,x"
    assert _io.sha256_file(tmp_path / "a.csv") == _io.sha256_bytes((tmp_path / "a.csv").read_bytes())


def test_public_error_tree():
    for name in wavetrail.__all__:
        assert hasattr(wavetrail, name)
    assert issubclass(wavetrail.UsageError, wavetrail.WavetrailError)
    assert wavetrail.UsageError.exit_code == 2
    assert wavetrail.ConfigError.exit_code == 1
    err = wavetrail.ConfigError("bad key 'forrest'", hint="did you mean 'forest'?")
    assert "forest" in str(err)
