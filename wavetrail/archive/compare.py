"""Compare an archived output with its rebuilt counterpart.

Three verdicts: ``identical`` (same bytes), ``within tolerance`` (a CSV table
or JSON document whose text cells are equal and whose numbers agree within a
relative tolerance, or a Parquet table, the stored panel, with the same columns,
types and rows) and ``different`` (with what differs). Only CSV, JSON and Parquet
are parsed, as data; nothing is unpickled or run.
"""

from __future__ import annotations

import json
import math
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

IDENTICAL = "identical"
WITHIN = "within tolerance"
DIFFERENT = "different"
MISSING = "missing"


@dataclass(frozen=True)
class Comparison:
    """The verdict on one output: ``status`` and a human-readable ``detail``."""

    status: str
    detail: str = ""
    max_rel_diff: float | None = None


def _rel(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    scale = np.maximum(np.abs(a), np.abs(b))
    diff = np.abs(a - b)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(diff == 0, 0.0, diff / np.where(scale == 0, 1.0, scale))


def _numbers_close(a: float, b: float, rtol: float, atol: float) -> bool:
    if math.isnan(a) or math.isnan(b):
        return math.isnan(a) and math.isnan(b)
    return abs(a - b) <= atol + rtol * max(abs(a), abs(b))


def compare_tables(old: Path, new: Path, rtol: float = 1e-6, atol: float = 0.0) -> Comparison:
    """Compare two CSV tables cell by cell (same columns and rows, numbers within ``rtol``)."""
    try:
        sep = "\t" if Path(old).suffix.lower() == ".tsv" else ","
        a = pd.read_csv(old, sep=sep, keep_default_na=True)
        b = pd.read_csv(new, sep=sep, keep_default_na=True)
    except (pd.errors.ParserError, pd.errors.EmptyDataError, UnicodeDecodeError) as err:
        return Comparison(DIFFERENT, f"bytes differ and the table cannot be parsed ({err})")
    if list(a.columns) != list(b.columns):
        gone = [c for c in a.columns if c not in b.columns]
        new_cols = [c for c in b.columns if c not in a.columns]
        return Comparison(DIFFERENT, f"columns differ (only archived: {gone}; only rebuilt: {new_cols})")
    if len(a) != len(b):
        return Comparison(DIFFERENT, f"{len(a)} rows archived, {len(b)} rebuilt")
    worst = 0.0
    problems = []
    for col in a.columns:
        x, y = a[col], b[col]
        xn = pd.api.types.is_numeric_dtype(x) and not pd.api.types.is_bool_dtype(x)
        yn = pd.api.types.is_numeric_dtype(y) and not pd.api.types.is_bool_dtype(y)
        if xn and yn:
            xv, yv = x.to_numpy(float), y.to_numpy(float)
            nan_x, nan_y = np.isnan(xv), np.isnan(yv)
            if (nan_x != nan_y).any():
                row = int(np.flatnonzero(nan_x != nan_y)[0])
                problems.append(f"{col}: missing in one table only (row {row + 1}: {xv[row]} vs {yv[row]})")
                continue
            ok = ~nan_x
            rel = _rel(xv[ok], yv[ok])
            bad = np.abs(xv[ok] - yv[ok]) > atol + rtol * np.maximum(np.abs(xv[ok]), np.abs(yv[ok]))
            if rel.size:
                worst = max(worst, float(rel.max()))
            if bad.any():
                idx = np.flatnonzero(ok)[int(np.argmax(np.where(bad, rel, -1)))]
                problems.append(f"{col}: row {idx + 1} {xv[idx]:.10g} vs {yv[idx]:.10g} "
                                f"(relative difference {rel.max():.3g} > {rtol:g})")
        else:
            xs, ys = x.astype("string").fillna("<NA>"), y.astype("string").fillna("<NA>")
            neq = (xs != ys).to_numpy()
            if neq.any():
                row = int(np.flatnonzero(neq)[0])
                problems.append(f"{col}: row {row + 1} {xs.iloc[row]!r} vs {ys.iloc[row]!r} "
                                f"({int(neq.sum())} cells differ)")
    if problems:
        return Comparison(DIFFERENT, "; ".join(problems[:5]) + (" ..." if len(problems) > 5 else ""), worst)
    return Comparison(WITHIN, f"numbers agree within rtol {rtol:g} (largest relative difference {worst:.3g})", worst)


def _walk(a, b, path: str, rtol: float, atol: float, out: list, worst: list) -> None:
    if isinstance(a, bool) or isinstance(b, bool) or a is None or b is None or isinstance(a, str) or isinstance(b, str):
        if a != b:
            out.append(f"{path or '/'}: {a!r} vs {b!r}")
        return
    if isinstance(a, (int, float)) and isinstance(b, (int, float)):
        fa, fb = float(a), float(b)
        if not (math.isnan(fa) and math.isnan(fb)) and fa != fb:
            worst[0] = max(worst[0], abs(fa - fb) / max(abs(fa), abs(fb)))
        if not _numbers_close(fa, fb, rtol, atol):
            out.append(f"{path or '/'}: {a!r} vs {b!r}")
        return
    if isinstance(a, dict) and isinstance(b, dict):
        if set(a) != set(b):
            out.append(f"{path or '/'}: keys differ ({sorted(set(a) ^ set(b))[:5]})")
            return
        for k in sorted(a):
            _walk(a[k], b[k], f"{path}/{k}", rtol, atol, out, worst)
        return
    if isinstance(a, list) and isinstance(b, list):
        if len(a) != len(b):
            out.append(f"{path or '/'}: {len(a)} items vs {len(b)}")
            return
        for i, (x, y) in enumerate(zip(a, b)):
            _walk(x, y, f"{path}/{i}", rtol, atol, out, worst)
        return
    out.append(f"{path or '/'}: {type(a).__name__} vs {type(b).__name__}")


def compare_json(old: Path, new: Path, rtol: float = 1e-6, atol: float = 0.0) -> Comparison:
    """Compare two JSON documents: same structure and strings, numbers within ``rtol``."""
    try:
        a = json.loads(Path(old).read_text(encoding="utf-8"))
        b = json.loads(Path(new).read_text(encoding="utf-8"))
    except (json.JSONDecodeError, UnicodeDecodeError) as err:
        return Comparison(DIFFERENT, f"bytes differ and the JSON cannot be parsed ({err})")
    problems: list[str] = []
    worst = [0.0]
    _walk(a, b, "", rtol, atol, problems, worst)
    if problems:
        return Comparison(DIFFERENT, "; ".join(problems[:5]) + (" ..." if len(problems) > 5 else ""), worst[0])
    return Comparison(WITHIN, f"numbers agree within rtol {rtol:g} (largest relative difference {worst[0]:.3g})",
                      worst[0])


def compare_parquet(old: Path, new: Path, rtol: float = 1e-6, atol: float = 0.0) -> Comparison:
    """Compare two Parquet tables (the stored panel) by content: the same columns, types and rows,
    numbers within ``rtol``. The bytes of the same table may differ between versions of the
    Parquet writer (it names itself in the file). Only the data are read; nothing is run."""
    try:
        import pyarrow.parquet as pq

        a, b = pq.read_table(old), pq.read_table(new)
    except Exception as err:  # not Parquet: no table to compare
        return Comparison(DIFFERENT, f"bytes differ and the Parquet table cannot be read ({type(err).__name__})")
    if a.column_names != b.column_names:
        gone = [c for c in a.column_names if c not in b.column_names]
        new_cols = [c for c in b.column_names if c not in a.column_names]
        return Comparison(DIFFERENT, f"columns differ (only archived: {gone}; only rebuilt: {new_cols})")
    if a.num_rows != b.num_rows:
        return Comparison(DIFFERENT, f"{a.num_rows} rows archived, {b.num_rows} rebuilt")
    worst = 0.0
    for name in a.column_names:
        x, y = a.column(name), b.column(name)
        if x.type != y.type:
            return Comparison(DIFFERENT, f"{name}: type {x.type} archived, {y.type} rebuilt")
        if pa_numeric(x.type):
            xv = x.to_numpy(zero_copy_only=False).astype(float)
            yv = y.to_numpy(zero_copy_only=False).astype(float)
            nan_x, nan_y = np.isnan(xv), np.isnan(yv)
            if (nan_x != nan_y).any():
                row = int(np.flatnonzero(nan_x != nan_y)[0])
                return Comparison(DIFFERENT, f"{name}: missing in one table only (row {row + 1})")
            ok = ~nan_x
            bad = np.abs(xv[ok] - yv[ok]) > atol + rtol * np.maximum(np.abs(xv[ok]), np.abs(yv[ok]))
            if bad.any():
                row = int(np.flatnonzero(ok)[int(np.flatnonzero(bad)[0])])
                return Comparison(DIFFERENT, f"{name}: row {row + 1}: {xv[row]} archived vs {yv[row]} rebuilt")
            rel = _rel(xv[ok], yv[ok])
            if rel.size:
                worst = max(worst, float(rel.max()))
        elif not x.equals(y):
            return Comparison(DIFFERENT, f"{name}: values differ")
    return Comparison(WITHIN, f"same columns, types and rows (bytes differ; largest relative difference "
                              f"{worst:.2g})", worst)


def pa_numeric(t) -> bool:
    """True for Parquet/Arrow integer and floating types."""
    import pyarrow.types as pt

    return pt.is_integer(t) or pt.is_floating(t)


def compare_files(old: str | Path, new: str | Path, rtol: float = 1e-6) -> Comparison:
    """The verdict on one output file (``old`` archived, ``new`` rebuilt)."""
    old, new = Path(old), Path(new)
    if not new.is_file():
        return Comparison(MISSING, "the rebuild did not write this output")
    a, b = old.read_bytes(), new.read_bytes()
    if a == b:
        return Comparison(IDENTICAL, "same bytes", 0.0)
    suffix = old.suffix.lower()
    if suffix in (".csv", ".tsv"):
        return compare_tables(old, new, rtol)
    if suffix == ".json":
        return compare_json(old, new, rtol)
    if suffix == ".parquet":
        return compare_parquet(old, new, rtol)
    return Comparison(DIFFERENT, f"bytes differ ({len(a)} archived vs {len(b)} rebuilt; "
                                 "not a table, so no tolerance applies)")
