"""The stored panel: the tidy long panel written once, typed, for the steps after the checks.

The check step reads the raw files and builds :class:`wavetrail.panel.Panel`
(about 11 s for a file of 8.8 million records); every later step that needs the
data (scores, reliability, invariance, growth predictors, each forest shard, the
forest summary) reads this file instead of the raw files again.

What the file holds
-------------------
One Parquet file (snappy, dictionary pages, row groups of 2^20 rows, no
statistics), one row per (id, wave), the columns of :attr:`Panel.long` in
their order: the id column, the wave column and every codebook variable
(derived ones included), with their types: numbers as float64 (missing codes
already NaN, stored as NaN), categories as 16-bit codes into the codebook's levels (null =
missing; the levels and whether they are ordered are in the metadata), text as
strings, dates as timestamps. Never a variable marked
``identifier: true``: those are dropped before writing (no later step reads
them). The raw records, their file/row origin and the reasons of declared
missing codes stay with the check step.

The Parquet key-value metadata hold one JSON entry (:data:`META_KEY`): the
format version, the id and wave column names, the waves, the pandas dtype of
each column in order and the levels of each category (so the reader restores e.g. an object column of whole
numbers exactly) and the sha256 of the codebook file the panel was built with.
pandas' own metadata entry is not written (it names the pandas version and
nothing here needs it); nothing in the file names a time or a path, so the same
data and the same package versions give the same bytes.

Stale data
----------
The workflow reruns the check step when a raw file or the codebook changes (both
are its inputs), and refuses raw files that differ from their registered hash
before the check step runs. :func:`read_stored_panel` also refuses a stored panel
written with another codebook file (its sha256 differs) or whose columns and
types no longer fit the codebook, naming the file and what to do.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd

from wavetrail._io import atomic_write_with
from wavetrail.codebook import Codebook, load_codebook
from wavetrail.errors import DataError
from wavetrail.panel import Panel

__all__ = ["META_KEY", "FORMAT", "STORED_PANEL", "WITHHELD_REASON", "stored_columns", "StoredPanel", "panel_frame", "write_stored_panel", "read_stored_panel"]

#: where a project's check step writes the stored panel (relative to the project)
STORED_PANEL = "results/checks/panel.parquet"
#: why an archive without the raw data leaves it out (its ``withheld`` reason)
WITHHELD_REASON = ("row-level copy of the raw data (the typed panel the check step writes for the later "
                   "steps); kept by the authors like the raw data, rebuilt from them by the check step")
#: key of wavetrail's entry in the Parquet key-value metadata
META_KEY = b"wavetrail.stored_panel"
#: format version of that entry
FORMAT = 1
#: rows per Parquet row group (fixed, so the layout does not depend on a library default)
ROW_GROUP = 1 << 20


class StoredPanel(Panel):
    """A :class:`Panel` read from the stored panel file.

    ``long``, ``codebook``, ``id``, ``wave``, ``waves`` and the views
    (:meth:`ids`, :meth:`baseline`, :meth:`predictors`, :meth:`items`) are those
    of the panel built from the raw files, identifier columns aside. The raw
    records, their origin, the sources and the reasons of missing codes are not
    stored: ``records``, ``origin``, ``sources`` and ``missing_reasons`` are None.
    """

    def __init__(self, codebook: Codebook, long: pd.DataFrame):  # noqa: D107 (no raw files to read)
        self._set_study(codebook, sources=None, records=None)
        self.origin = None
        self.missing_reasons = None
        self.long = long


def panel_frame(panel: Panel) -> pd.DataFrame:
    """:attr:`Panel.long` without the columns of variables marked ``identifier: true``."""
    drop = [n for n in panel.codebook.identifiers if n in panel.long.columns and n not in (panel.id, panel.wave)]
    return panel.long.drop(columns=drop) if drop else panel.long


def _codebook_hash(codebook_path) -> str | None:
    from wavetrail._io import sha256_file

    return sha256_file(codebook_path) if codebook_path is not None else None


def _column_kind(col: pd.Series) -> str:
    """The pandas dtype a column is restored to (``object-int``: Python whole numbers in an object column)."""
    if isinstance(col.dtype, pd.CategoricalDtype):
        return "category"
    if isinstance(col.dtype, pd.StringDtype):
        return f"text:{col.dtype}"  # pandas' text type (``str`` or ``string``), restored as such
    if col.dtype == object:
        values = col.dropna()
        if len(values) and pd.api.types.infer_dtype(values, skipna=True) == "integer":
            return "object-int"
        return "object"
    return str(col.dtype)


def write_stored_panel(panel: Panel, path, codebook_path=None) -> Path:
    """Write the stored panel of ``panel`` to ``path`` (atomically: temporary file, then rename).

    Parameters
    ----------
    panel : Panel
        From :func:`wavetrail.panel.load_panel`.
    path : path
        The ``.parquet`` file to write.
    codebook_path : path, optional
        The codebook file the panel was built with; its sha256 goes into the
        file, so a reader with another codebook refuses it.

    Returns
    -------
    Path
        ``path``.
    """
    import pyarrow as pa
    import pyarrow.parquet as pq

    frame = panel_frame(panel)
    columns, kinds, levels = {}, {}, {}
    for name in frame.columns:
        col = frame[name]
        kind = _column_kind(col)
        kinds[str(name)] = kind
        if kind == "category":
            # the codes into the codebook's levels (null = missing); levels and order go in the metadata
            codes = col.cat.codes.to_numpy()
            columns[str(name)] = pa.array(codes.astype(np.int16), mask=codes < 0, type=pa.int16())
            levels[str(name)] = {"levels": [_plain(c) for c in col.cat.categories], "ordered": bool(col.cat.ordered)}
        elif kind == "object-int":
            columns[str(name)] = pa.array(col.to_numpy(dtype=object), type=pa.int64(), from_pandas=True)
        elif kind.startswith("text:"):
            columns[str(name)] = pa.array(col.to_numpy(dtype=object, na_value=None), type=pa.string())
        elif kind == "object":
            # text (or a mix): written as text, missing cells as nulls
            values = [None if v is None or (isinstance(v, float) and np.isnan(v)) else str(v)
                      for v in col.to_numpy(dtype=object)]
            columns[str(name)] = pa.array(values, type=pa.string())
        elif col.dtype.kind in "iufb":
            # numbers as they are: NaN stays NaN (not a null), so reading them back is one copy
            columns[str(name)] = pa.array(col.to_numpy(), from_pandas=False)
        else:
            columns[str(name)] = pa.Array.from_pandas(col)
    table = pa.table(columns)
    meta = {"format": FORMAT, "id": panel.id, "wave": panel.wave, "waves": [_plain(w) for w in panel.waves],
            "columns": [[n, k] for n, k in kinds.items()], "levels": levels, "codebook_sha256": _codebook_hash(codebook_path), "rows": int(len(frame))}
    table = table.replace_schema_metadata({META_KEY: json.dumps(meta, sort_keys=True).encode("utf-8")})
    return atomic_write_with(path, lambda fh: pq.write_table(
        table, fh, compression="snappy", row_group_size=ROW_GROUP, write_statistics=False, use_dictionary=True,
        store_schema=True))


def _plain(value):
    if isinstance(value, np.integer):
        return int(value)
    if isinstance(value, np.floating):
        return float(value)
    return value


def read_stored_panel(path, codebook, codebook_path=None) -> StoredPanel:
    """Read the stored panel written by :func:`write_stored_panel`.

    Parameters
    ----------
    path : path
        The stored panel (``results/checks/panel.parquet`` in a project).
    codebook : Codebook or path
        The project's codebook. Given as a path, its sha256 must equal the one
        the file was written with.
    codebook_path : path, optional
        The file ``codebook`` was read from, when it is given as a Codebook
        (the same sha256 test).

    Raises
    ------
    DataError
        The file is missing or not a stored panel, was written with another
        codebook, or its columns or types do not fit the codebook.
    """
    import pyarrow as pa
    import pyarrow.compute as pc
    import pyarrow.parquet as pq

    path = Path(path)
    hint = "run the check step again (`wavetrail build` reruns it when the data or the codebook change)"
    if not isinstance(codebook, Codebook):
        codebook_path = Path(codebook)
        codebook = load_codebook(codebook_path)
    try:
        table = pq.read_table(path)
    except FileNotFoundError:
        raise DataError(f"{path}: the stored panel is missing", hint=hint) from None
    except (pa.ArrowException, OSError) as err:
        raise DataError(f"{path}: not a readable stored panel ({err})", hint=hint) from None
    raw_meta = (table.schema.metadata or {}).get(META_KEY)
    try:
        meta = json.loads(raw_meta.decode("utf-8")) if raw_meta else None
    except (UnicodeDecodeError, json.JSONDecodeError):
        meta = None
    if not isinstance(meta, dict) or meta.get("format") != FORMAT:
        raise DataError(f"{path}: not a stored panel of this wavetrail version (no {META_KEY.decode()} "
                        f"entry of format {FORMAT})", hint=hint)
    if codebook_path is not None and meta.get("codebook_sha256") not in (None, _codebook_hash(codebook_path)):
        raise DataError(f"{path}: written with another codebook than {codebook_path} (sha256 differs); "
                        "the stored panel is stale", hint=hint)
    study = codebook.study
    if meta.get("id") != study.id or meta.get("wave") != (study.wave or "wave") \
            or meta.get("waves") != [_plain(w) for w in study.waves]:
        raise DataError(f"{path}: id, wave column or waves differ from the codebook's study section; "
                        "the stored panel is stale", hint=hint)
    try:
        kinds = {str(n): str(k) for n, k in meta.get("columns") or []}
    except (TypeError, ValueError):
        kinds = {}
    if list(kinds) != table.column_names:
        raise DataError(f"{path}: the columns differ from those its description lists", hint=hint)
    for name in codebook.identifiers:
        if name in kinds and name not in (study.id, study.wave):
            raise DataError(f"{path}: holds the identifier column {name!r}, which a stored panel never holds",
                            hint=hint)
    expected = [v.name for v in codebook.data_variables() if not v.identifier and v.name != study.wave]
    missing = [n for n in expected if n not in kinds]
    if missing:
        raise DataError(f"{path}: lacks the codebook variable(s) {missing[:5]}; the stored panel is stale",
                        hint=hint)
    columns = {}
    for name, kind in kinds.items():
        col = table.column(name)
        if kind == "category":
            var = codebook.variables.get(name)
            if var is None or var.type != "category":
                raise DataError(f"{path}: column {name!r} is stored as a category but the codebook does not "
                                "declare it one; the stored panel is stale", hint=hint)
            dtype = pd.CategoricalDtype(list(var.levels), ordered=bool(var.ordered))
            said = (meta.get("levels") or {}).get(name) or {}
            if said.get("levels") != [_plain(c) for c in dtype.categories] or said.get("ordered") != dtype.ordered:
                raise DataError(f"{path}: the levels of {name!r} differ from the codebook's; "
                                "the stored panel is stale", hint=hint)
            codes = pc.fill_null(col, -1).to_numpy().astype(np.int16, copy=False)
            if len(codes) and (codes.max() >= len(dtype.categories) or codes.min() < -1):
                raise DataError(f"{path}: column {name!r} holds codes outside its levels", hint=hint)
            columns[name] = pd.Categorical.from_codes(codes, dtype=dtype)
        elif kind == "object-int":
            out = np.empty(len(col), dtype=object)
            arr = col.to_numpy(zero_copy_only=False)
            valid = ~pd.isna(arr)
            out[:] = [int(v) if ok else np.nan for v, ok in zip(arr, valid)]
            columns[name] = out
        elif kind == "object":
            out = np.empty(len(col), dtype=object)
            out[:] = col.to_pylist()
            columns[name] = out
        elif kind.startswith("text:"):
            columns[name] = col.to_pandas().astype(kind.split(":", 1)[1]).array
        elif kind.startswith("datetime64"):
            columns[name] = col.to_pandas().to_numpy().astype(kind)
        else:
            columns[name] = col.to_numpy(zero_copy_only=False).astype(kind, copy=False)
    long = pd.DataFrame(columns, copy=False)
    if len(long) != meta.get("rows"):
        raise DataError(f"{path}: {len(long)} rows, its description says {meta.get('rows')}", hint=hint)
    return StoredPanel(codebook, long)


def stored_columns(path) -> list[str] | None:
    """The column names of a Parquet file (its schema only; None when it is not readable Parquet)."""
    try:
        import pyarrow.parquet as pq

        return list(pq.read_schema(path).names)
    except Exception:
        return None
