"""One place for file plumbing: atomic writes, hashing, deterministic tables and YAML.

Every file wavetrail writes goes through :func:`atomic_write_bytes` (temporary
file in the same folder, fsync, rename), so a killed job never leaves a
half-written output behind.
"""

from __future__ import annotations

import hashlib
import io
import json
import os
import tempfile
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

#: float format of every CSV table wavetrail writes (fixed, so tables are byte-stable)
FLOAT_FORMAT = "%.10g"


def atomic_write_bytes(path: str | os.PathLike, data: bytes) -> Path:
    """Write ``data`` to ``path`` through a temporary file and an atomic rename."""
    return atomic_write_with(path, lambda fh: fh.write(data))


def atomic_write_with(path: str | os.PathLike, write) -> Path:
    """Call ``write(fh)`` on a temporary binary file beside ``path``, then rename it to ``path``
    (for writers that stream, e.g. Parquet); the temporary file is removed on any error."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    try:
        with os.fdopen(fd, "wb") as fh:
            write(fh)
            fh.flush()
            os.fsync(fh.fileno())
        os.replace(tmp, path)
    except BaseException:
        try:
            os.unlink(tmp)
        except FileNotFoundError:
            pass
        raise
    return path


def atomic_write_text(path: str | os.PathLike, text: str) -> Path:
    """Write UTF-8 text atomically (newlines are written as given)."""
    return atomic_write_bytes(path, text.encode("utf-8"))


def write_json(path: str | os.PathLike, obj: Any) -> Path:
    """Write JSON atomically with sorted keys and a trailing newline (byte-stable)."""
    return atomic_write_text(path, json.dumps(obj, indent=2, sort_keys=True, default=_json_default) + "\n")


def _json_default(obj: Any):
    if isinstance(obj, (np.integer,)):
        return int(obj)
    if isinstance(obj, (np.floating,)):
        return float(obj)
    if isinstance(obj, np.ndarray):
        return obj.tolist()
    if isinstance(obj, Path):
        return obj.as_posix()
    raise TypeError(f"not JSON serialisable: {type(obj).__name__}")


def table_to_csv(df: pd.DataFrame) -> str:
    """Render a table as CSV text the same way everywhere (fixed float format, no index, LF)."""
    buf = io.StringIO()
    df.to_csv(buf, index=False, float_format=FLOAT_FORMAT, lineterminator="\n")
    return buf.getvalue()


def write_table(path: str | os.PathLike, df: pd.DataFrame) -> Path:
    """Write a tidy table as CSV atomically, byte-stable for the same content."""
    return atomic_write_text(path, table_to_csv(df))


def sha256_file(path: str | os.PathLike, chunk: int = 1 << 20) -> str:
    """Hex sha256 of a file's bytes."""
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        while True:
            block = fh.read(chunk)
            if not block:
                break
            h.update(block)
    return h.hexdigest()


def sha256_bytes(data: bytes) -> str:
    return hashlib.sha256(data).hexdigest()
