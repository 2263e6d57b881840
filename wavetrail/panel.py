"""Data files + codebook -> one tidy long panel.

:func:`load_panel` reads one long file, one wide file or one file per wave
and brings them into one form: a row per (id, wave) with every codebook
variable as a column, declared missing codes turned into NaN (their reasons
kept in :attr:`Panel.missing_reasons`) and categories as pandas Categoricals.

Loading is tolerant on purpose: unknown or absent columns, duplicated
(id, wave) rows, values of the wrong type and unknown waves are kept in
:attr:`Panel.records` (as read, with their file and row) for the check
suite (:mod:`wavetrail.checks`) to report; they are never merged silently.
Only a file that cannot be read, or one without the id column, raises.
"""

from __future__ import annotations

import difflib
import os
from dataclasses import dataclass, field
from pathlib import Path
from typing import Iterable, Sequence

import numpy as np
import pandas as pd

from wavetrail.codebook import Codebook, Variable, load_codebook
from wavetrail.errors import DataError
from wavetrail.readers import RawTable, read_table, table_from_frame

__all__ = ["Panel", "Source", "load_panel", "wave_key", "FILE", "ROW"]

#: columns of :attr:`Panel.records` holding where a record came from
FILE, ROW, WAVE_RAW = "_file", "_row", "_wave_raw"


@dataclass
class Source:
    """One data file and how its columns map onto the codebook.

    ``columns`` maps a file column to ``(variable, wave)`` (wave None for a
    long file's own wave column); ``unknown`` lists columns the codebook does
    not know; ``absent`` lists ``(variable, wave)`` the codebook expects but the
    file lacks.
    """

    table: RawTable
    waves: list
    layout: str
    columns: dict = field(default_factory=dict)
    unknown: list = field(default_factory=list)
    absent: list = field(default_factory=list)
    #: wide files: variables without ``waves:`` found as one column without a wave suffix
    #: (read as measured once, at the first wave)
    once: list = field(default_factory=list)

    @property
    def name(self) -> str:
        return self.table.name


def wave_key(value) -> str | None:
    """A wave value as comparable text (``1``, ``1.0`` and ``"1"`` are the same wave)."""
    if value is None or (isinstance(value, float) and np.isnan(value)):
        return None
    if isinstance(value, (int, np.integer)):
        return str(int(value))
    if isinstance(value, (float, np.floating)):
        return str(int(value)) if float(value).is_integer() else repr(float(value))
    text = str(value).strip()
    try:
        f = float(text)
    except ValueError:
        return text
    return str(int(f)) if f.is_integer() else repr(f)


# --------------------------------------------------------------------------- per column, not per value
#
# The functions below take a whole column and give what the per-value
# functions (wave_key, level_of, ...) give for each of its cells, calling the
# per-value function once per distinct value instead of once per cell: the
# column is factorised (in C), the function runs on the distinct values and
# the result is spread back with one take. Results are those of the per-value
# function by construction, as long as factorising only merges cells the
# function cannot tell apart: numbers are factorised by their bits (so -0.0
# and 0.0 stay apart) and text columns only when every cell is text; any other
# mix (ints and text in one object column, say) goes cell by cell.


def factorize_column(raw) -> tuple[np.ndarray, list] | None:
    """Integer codes (-1 = missing) and the distinct values as Python objects.

    Missing = None or NaN (the per-value functions treat both the same).
    Returns None when the column mixes kinds of values that factorising
    could merge (e.g. ``1``, ``1.0`` and ``True`` in one object column).
    """
    values = raw.to_numpy() if isinstance(raw, (pd.Series, pd.Index)) else np.asarray(raw)
    kind = values.dtype.kind
    if kind in "iu" and len(values):
        small = _factorize_small_ints(values)
        if small is not None:
            return small[0], small[1].tolist()
    if kind == "f" and len(values):
        # whole numbers in a short range (item answers with gaps): integer codes, no hashing
        missing = np.isnan(values)
        filled = values[~missing]
        if len(filled) and np.all(filled == np.round(filled)) and np.abs(filled).max() < 2**53 \
                and not np.any((filled == 0) & np.signbit(filled)):
            small = _factorize_small_ints(np.where(missing, filled[0], values).astype(np.int64))
            if small is not None:
                codes, uniq = small
                return np.where(missing, -1, codes), uniq.astype(values.dtype).tolist()
    if kind == "f":
        missing = np.isnan(values)
        bits = values.view(np.int64 if values.dtype.itemsize == 8 else np.int32)
        codes, uniq = pd.factorize(np.where(missing, 0, bits))
        codes = np.where(missing, -1, codes)
        uniq = np.asarray(uniq).view(values.dtype)
        return codes.astype(np.int64), uniq.tolist()
    if kind in "iub":
        codes, uniq = pd.factorize(values)
        return codes.astype(np.int64), np.asarray(uniq).tolist()
    if kind in "OUT" or isinstance(getattr(raw, "dtype", None), pd.StringDtype):
        obj = np.asarray(values, dtype=object)
        inferred = pd.api.types.infer_dtype(obj, skipna=True)
        if inferred not in ("string", "empty", "integer"):  # all text, or all Python ints
            return None
        codes, uniq = pd.factorize(obj, use_na_sentinel=True)
        return codes.astype(np.int64), list(uniq)
    return None


def _small_int_index(values: np.ndarray, span: int = 1 << 20):
    """``(index, base, present)`` for integers spanning fewer than ``span`` values (else None):
    ``index`` = ``values - base`` as array positions (the values themselves when none is negative
    and the largest is below ``span``: no subtraction), ``present[i]`` = ``base + i`` occurs."""
    lo, hi = int(values.min()), int(values.max())
    if hi - lo >= span:
        return None
    if lo >= 0 and hi < span and values.dtype.kind == "i" and values.dtype.itemsize == np.dtype(np.intp).itemsize:
        base, index = 0, values
    elif lo >= 0 or values.dtype.kind == "i":
        base, index = lo, (values - lo).astype(np.intp, copy=False)
    else:
        return None
    present = np.bincount(index, minlength=hi - base + 1) > 0
    return index, base, present


def _factorize_small_ints(values: np.ndarray, span: int = 1 << 20):
    """Codes and distinct values of integers spanning fewer than ``span`` values (else None)."""
    found = _small_int_index(values, span)
    if found is None:
        return None
    index, base, present = found
    code_of = np.cumsum(present) - 1
    uniq = (np.flatnonzero(present) + base).astype(values.dtype)
    return code_of[index].astype(np.int64, copy=False), uniq


def _small_int_lookup(values: np.ndarray, func, dtype) -> np.ndarray | None:
    """``func(v)`` of every cell of an integer column, by one table look-up per cell: ``func``
    runs once per distinct value (as a Python int, what :func:`factorize_column` passes). None
    for other columns or a wide span of values."""
    if values.dtype.kind not in "iu" or not len(values):
        return None
    found = _small_int_index(values)
    if found is None:
        return None
    index, base, present = found
    table = np.zeros(len(present), dtype=dtype)
    distinct = np.flatnonzero(present)
    for i, v in zip(distinct.tolist(), (distinct + base).astype(values.dtype).tolist()):
        table[i] = func(v)
    return table[index]


def map_column(raw, func) -> np.ndarray:
    """``func`` of every cell as an object array, calling ``func`` once per distinct value.

    Equals ``[func(v) for v in raw]`` (each cell as the Python object
    ``Series.map`` would pass), missing cells included.
    """
    values = raw.to_numpy() if isinstance(raw, (pd.Series, pd.Index)) else np.asarray(raw)
    fact = factorize_column(values)
    if fact is None:
        out = np.empty(len(values), dtype=object)
        out[:] = [func(v) for v in values.astype(object)]
        return out
    codes, uniq = fact
    results = np.empty(len(uniq) + 1, dtype=object)
    for i, v in enumerate(uniq):
        results[i] = func(v)
    missing = codes < 0
    if values.dtype.kind == "f":
        results[-1] = func(float("nan"))
    elif missing.any():
        r_none, r_nan = func(None), func(float("nan"))
        if not (r_none is r_nan or (type(r_none) is type(r_nan) and r_none == r_nan)):
            out = results[codes]
            where = np.flatnonzero(missing)
            cells = values[where].astype(object)
            out[where] = [func(v) for v in cells]
            return out
        results[-1] = r_none
    return results[codes]


def wave_keys(raw) -> np.ndarray:
    """:func:`wave_key` of every cell (object array, None for missing)."""
    return map_column(raw, wave_key)


def wave_positions(raw, waves) -> np.ndarray:
    """Position in ``waves`` of the wave each cell stands for (by :func:`wave_key`), -1 for none."""
    lookup: dict = {}
    for i, w in enumerate(waves):
        lookup[wave_key(w)] = i  # a later wave with the same key wins, as in a dict
    values = raw.to_numpy() if isinstance(raw, (pd.Series, pd.Index)) else np.asarray(raw)
    direct = _small_int_lookup(values, lambda v: lookup.get(wave_key(v), -1), np.int64)
    if direct is not None:  # integer waves: one look-up per cell, no codes in between
        return direct
    fact = factorize_column(values)
    if fact is None:
        return map_column(raw, lambda v: lookup.get(wave_key(v), -1)).astype(np.int64)
    codes, uniq = fact  # one look-up per distinct value; a missing cell (code -1) is no wave
    at = np.asarray([lookup.get(wave_key(v), -1) for v in uniq] + [-1], dtype=np.int64)
    return at[codes]


def _to_text(v):
    return None if v is None or (isinstance(v, float) and np.isnan(v)) else str(v)


def _strip_id(v):
    return None if v is None else str(v).strip()


def _to_stripped(v):
    return None if v is None or (isinstance(v, float) and np.isnan(v)) else str(v).strip()


def text_column(raw) -> np.ndarray:
    """``str(value)`` of every cell (None for missing), as an object array."""
    return map_column(raw, _to_text)


def level_column(raw, codes: list) -> np.ndarray:
    """:func:`level_of` of every cell against ``codes`` (object array, None for none)."""
    return map_column(raw, lambda v: level_of(v, codes))


class Panel:
    """A multi-wave panel in one tidy long form.

    Attributes
    ----------
    codebook : Codebook
    long : DataFrame
        One row per (id, wave): the id column, the wave column (named as in
        the codebook; ``wave`` for wide data) and every codebook variable.
        Declared missing codes are NaN; categories are Categoricals (ordered
        where the codebook says); rows sorted by id, then wave order.
    missing_reasons : DataFrame
        id, wave, variable, code, reason of every declared missing code met.
    records : DataFrame
        Every record as read (before cleaning), with ``_file`` and ``_row``.
    origin : DataFrame
        ``_file`` and ``_row`` of each row of :attr:`long` (same order).
    sources : list of Source
    """

    def __init__(self, codebook: Codebook, sources: list[Source], records: pd.DataFrame):
        self._set_study(codebook, sources, records)
        self.long, self.missing_reasons, self.origin = _clean(self)

    def _set_study(self, codebook: Codebook, sources, records) -> None:
        """The codebook, the files and records as read, and the study's id, wave and waves."""
        self.codebook = codebook
        self.sources = sources
        self.records = records
        self.id = codebook.study.id
        self.wave = codebook.study.wave or "wave"
        self.waves = list(codebook.study.waves)

    # -- views ------------------------------------------------------------

    def ids(self) -> pd.Index:
        """Every person id in the panel, sorted."""
        return pd.Index(pd.unique(self.long[self.id]), name=self.id).sort_values()

    def baseline(self, names: Sequence[str] | None = None) -> pd.DataFrame:
        """First-wave values, one row per person (index id).

        A variable declared measured once (``waves: [first wave]``) takes, for a person
        with no first-wave record, the value that person's later rows agree on (long files
        repeat a time-invariant value on every row); otherwise a person without a
        first-wave record has missing values.

        Parameters
        ----------
        names : list of str, optional
            Variables to return; default every variable except the id, wave
            and identifier columns.
        """
        if names is None:
            names = [v.name for v in self.codebook.data_variables() if not v.identifier]
        names = list(names)
        unknown = [n for n in names if n not in self.long.columns]
        if unknown:
            raise DataError(f"variable(s) {unknown} are not in the codebook",
                            hint=_suggest(unknown[0], self.long.columns))
        first = self.long[self.long[self.wave] == self.waves[0]].set_index(self.id)
        out = first[names].reindex(self.ids())
        return self._carry_back(out, first.index)

    def _carry_back(self, out: pd.DataFrame, present: pd.Index) -> pd.DataFrame:
        """Values of variables declared measured once (at the first wave) for people without a
        first-wave record: long files repeat such a value on every row of a person, so the
        value their later rows agree on is theirs; rows that disagree leave it missing."""
        w0 = self.waves[0]
        once = [n for n in out.columns if (v := self.codebook.variables.get(n)) is not None
                and v.waves is not None and len(v.waves) == 1 and v.waves[0] == w0]
        absent = out.index[~out.index.isin(present)]
        if not once or len(absent) == 0:
            return out
        later = self.long[self.long[self.id].isin(absent)]
        for n in once:
            g = later.groupby(self.id, observed=True, sort=True)[n]
            agree = g.nunique(dropna=True) == 1
            values = g.first()[agree]
            if len(values):
                col = out[n].copy()
                col.loc[values.index] = values
                out[n] = col
        return out

    def predictors(self, spec, outcome: str | None = None) -> pd.DataFrame:
        """Candidate predictors, one row per person (index id).

        Parameters
        ----------
        spec : "wave1" or list of str
            ``"wave1"``: every variable measured at the first wave outside the
            scales, not the id, an identifier, text or date. A list names them.
        outcome : str, optional
            The outcome (scale or variable) of the model the predictors are for:
            with ``"wave1"``, its own raw variables are left out (the variable
            itself, a scale's items, the variable a derived outcome is computed
            from; see :meth:`Codebook.sources_of`). A list is taken as given.
        """
        if isinstance(spec, str):
            if spec not in ("wave1", "first_wave", f"wave{self.waves[0]}"):
                raise DataError(f"predictors {spec!r}: give \"wave1\" or a list of variable names")
            names = self.codebook.first_wave_predictors(outcome)
        else:
            names = [str(n) for n in spec]
            for n in names:
                var = self.codebook.variables.get(n)
                if var is None:
                    raise DataError(f"predictor {n!r} is not in the codebook",
                                    hint=_suggest(n, list(self.codebook.variables)))
                if var.identifier or n in (self.id, self.wave):
                    raise DataError(f"predictor {n!r} is an identifier or the id/wave column and "
                                    "can never be a predictor")
        return self.baseline(names)

    def items(self, scale: str) -> pd.DataFrame:
        """id, wave and the item columns of ``scale`` (long)."""
        sc = self.codebook.scales[scale]
        return self.long[[self.id, self.wave, *sc.items]]


# --------------------------------------------------------------------------- loading


def load_panel(paths, codebook: Codebook | str | os.PathLike) -> Panel:
    """Read data files into a :class:`Panel`.

    Parameters
    ----------
    paths : path, DataFrame, or a list of them
        One long file (id + wave columns), one wide file (columns named by
        ``study.wide``), or one file per wave. Per-wave files without a wave
        column are taken in the order of ``study.waves``.
    codebook : Codebook or path

    Returns
    -------
    Panel

    Raises
    ------
    DataError
        A file cannot be read, lacks the id column, or the files cannot be
        matched to waves.
    """
    if not isinstance(codebook, Codebook):
        codebook = load_codebook(codebook)
    items = list(paths) if isinstance(paths, (list, tuple)) else [paths]
    if not items:
        raise DataError("no data files given", hint="list them under `data:` in config/config.yaml")
    tables = [table_from_frame(p) if isinstance(p, pd.DataFrame) else read_table(p) for p in items]
    sources, frames = [], []
    for i, table in enumerate(tables):
        if codebook.layout == "wide":
            src, frame = _map_wide(table, codebook)
        else:
            src, frame = _map_long(table, codebook, i, len(tables))
        sources.append(src)
        frames.append(frame)
    if len(frames) > 1:
        names = list(dict.fromkeys(t.name for t in tables))
        for f in frames:  # one set of file names, so the concatenated column stays categorical
            f[FILE] = pd.Categorical(f[FILE], categories=names)
        records = pd.concat(frames, ignore_index=True, sort=False)
    else:
        records = frames[0]
    records = _normalise_ids(records, codebook.study.id)
    return Panel(codebook, sources, records)


def _require_id(table: RawTable, codebook: Codebook) -> None:
    sid = codebook.study.id
    if sid not in table.frame.columns:
        where = f"{table.path or table.name}"
        hint = _suggest(sid, table.frame.columns)
        if table.sheet is not None:
            where += f" (sheet {table.sheet!r}, the first of {len(table.sheets)}: {', '.join(map(repr, table.sheets))})"
            hint += ("; wavetrail reads the first sheet of a workbook: move the data sheet to the front "
                     "or save it as a CSV file and list that under `data:`")
        raise DataError(f"{where}: the id column {sid!r} (study.id) is not in the file", hint=hint)
    if len(table.frame) == 0:
        raise DataError(f"{table.path or table.name}: the file has a header but no data rows",
                        hint="copy the full data file again (the export may have stopped after the header)")


def _suggest(name: str, choices: Iterable) -> str:
    close = difflib.get_close_matches(str(name), [str(c) for c in choices], n=3)
    if close:
        return f"did you mean {', '.join(map(repr, close))}?"
    return "check the spelling in config/codebook.yaml"


def _map_long(table: RawTable, codebook: Codebook, index: int, n_files: int):
    _require_id(table, codebook)
    study = codebook.study
    frame = table.frame
    wave_col = study.wave
    if wave_col in frame.columns:
        raw_wave = frame[wave_col]
        distinct = _distinct_values(raw_wave)  # the distinct wave values, each keyed once
        distinct = pd.unique(wave_keys(raw_wave)) if distinct is None else [wave_key(v) for v in distinct]
        keys = sorted({k for k in distinct if k is not None})
        lookup = {wave_key(w): w for w in study.waves}
        waves = [lookup[k] for k in keys if k in lookup]
    elif n_files == len(study.waves) or len(study.waves) == 1:
        wave = study.waves[index if n_files > 1 else 0]
        raw_wave = pd.Series([wave] * len(frame))
        waves = [wave]
    else:
        raise DataError(f"{table.path or table.name}: the wave column {wave_col!r} (study.wave) is not in "
                        f"the file, and {n_files} file(s) cannot be matched to {len(study.waves)} waves",
                        hint="add the wave column, or give one file per wave in wave order")
    src = Source(table=table, waves=waves, layout="long" if wave_col in frame.columns else "per-wave")
    skip = {study.id, wave_col}
    for col in frame.columns:
        if col in skip:
            continue
        if col in codebook.variables and not codebook.variables[col].derived:
            src.columns[col] = (col, None)
        else:
            src.unknown.append(col)
    for var in codebook.file_variables():
        if var.name not in frame.columns:
            for w in waves:
                if var.measured_at(w):
                    src.absent.append((var.name, w))
    columns = {FILE: _file_column(table.name, len(frame)), ROW: table.rows,
               study.id: _column_values(frame[study.id]), WAVE_RAW: _column_values(raw_wave)}
    for col in src.columns:
        columns[col] = frame[col].to_numpy()
    # the record table shares the read columns (no copy, no 2-D block of all of them)
    return src, pd.DataFrame(columns, copy=False)


def _distinct_values(raw) -> list | None:
    """The distinct values of a column as :func:`factorize_column` lists them (None where it gives None);
    integers in a short span from one count per value, without codes per cell."""
    values = raw.to_numpy() if isinstance(raw, (pd.Series, pd.Index)) else np.asarray(raw)
    if values.dtype.kind in "iu" and len(values):
        found = _small_int_index(values)
        if found is not None:
            _, base, present = found
            return (np.flatnonzero(present) + base).astype(values.dtype).tolist()
    fact = factorize_column(values)
    return None if fact is None else fact[1]


def _file_column(name: str, n: int) -> pd.Categorical:
    """The ``_file`` column of ``n`` records of one file: a categorical (one byte per record, not one pointer)."""
    return pd.Categorical.from_codes(np.zeros(n, dtype=np.int8), categories=[name])


def _map_wide(table: RawTable, codebook: Codebook):
    _require_id(table, codebook)
    study = codebook.study
    frame = table.frame
    expected: dict[str, tuple] = {}
    for var in codebook.file_variables():
        for w in study.waves:
            if var.measured_at(w):
                expected[study.wide_column(var.name, w)] = (var.name, w)
    src = Source(table=table, waves=list(study.waves), layout="wide")
    plain: dict[str, str] = {}
    for col in frame.columns:
        if col == study.id:
            continue
        if col in expected:
            src.columns[col] = expected[col]
        elif col in codebook.variables and not codebook.variables[col].derived:
            # a time-invariant column without a wave suffix: measured once, at the first wave
            var = codebook.variables[col]
            first = (var.waves or study.waves)[0]
            src.columns[col] = (col, first)
            plain[col] = col
        else:
            src.unknown.append(col)
    covered = set(src.columns.values())
    for col, (name, w) in expected.items():
        if (name, w) not in covered and name not in plain:
            src.absent.append((name, w))
    src.once = sorted(n for n in plain if codebook.variables[n].waves is None)
    parts = []
    for w in study.waves:
        cols = {name: c for c, (name, ww) in src.columns.items() if ww == w}
        part = pd.DataFrame({FILE: _file_column(table.name, len(frame)), ROW: table.rows,
                             study.id: frame[study.id].to_numpy(dtype=object),
                             WAVE_RAW: [w] * len(frame)})
        for name, c in cols.items():
            part[name] = frame[c].to_numpy()
        if cols:  # a wave with no answer at all is a wave the person missed
            answered = frame[list(cols.values())].notna().any(axis=1).to_numpy()
            part = part[answered]
        else:
            part = part.iloc[0:0]
        parts.append(part)
    return src, pd.concat(parts, ignore_index=True, sort=False)


def _column_values(col: pd.Series) -> np.ndarray:
    """A column's values: numbers stay typed (no Python object per cell), anything else as objects."""
    if col.dtype.kind in "iuf":
        return col.to_numpy()
    return col.to_numpy(dtype=object)


def _normalise_ids(records: pd.DataFrame, sid: str) -> pd.DataFrame:
    ids = records[sid]
    if ids.dtype.kind in "iu":  # typed whole-number ids, none missing: already in final form
        return records.assign(**{sid: ids.astype(np.int64)})
    if ids.dtype.kind == "f" and ids.notna().all():
        v = ids.to_numpy()
        if len(v) and np.all(v == np.round(v)):
            return records.assign(**{sid: v.astype(np.int64)})
    filled = ids.notna() & (ids.astype(str).str.strip() != "")
    num = pd.to_numeric(ids[filled], errors="coerce")
    if len(num) and num.notna().all() and np.all(num == np.round(num)):
        out = pd.Series(np.nan, index=records.index, dtype=object)
        out[filled] = num.astype(np.int64).to_numpy()
        records = records.assign(**{sid: out})
        if filled.all():
            records = records.assign(**{sid: records[sid].astype(np.int64)})
    else:
        records = records.assign(**{sid: map_column(ids.where(filled, None), _strip_id)})
    return records


# --------------------------------------------------------------------------- cleaning


def _clean(panel: Panel):
    cb = panel.codebook
    rec = panel.records
    waves = list(cb.study.waves)
    pos = wave_positions(rec[WAVE_RAW], waves)
    keep = rec[panel.id].notna().to_numpy() & (pos >= 0)
    # the wave each record stands for is waves[pos]; its order is the (last) place of that wave
    place = {w: i for i, w in enumerate(waves)}
    order_of_pos = np.asarray([place[w] for w in waves], dtype=np.int64)
    # which records make the long table, in which order: worked out on (id, wave order) alone, then
    # each column taken once (no copy of the whole record table)
    every = bool(keep.all())
    kept = None if every else np.flatnonzero(keep)  # None: every record
    ids_kept = rec[panel.id].to_numpy() if every else rec[panel.id].to_numpy()[kept]
    if np.array_equal(order_of_pos, np.arange(len(waves))):  # distinct waves: the order is the place
        order_kept = pos if every else pos[kept]
    else:
        order_kept = order_of_pos[pos] if every else order_of_pos[pos[kept]]
    # one integer per (id, wave order), ids numbered in sorted order: the sorted distinct keys with
    # the first record of each are the long rows (a repeated pair keeps its first record), in order
    first_at = None  # None: the kept records as they come (sorted number ids, each pair once)
    if not _sorted_pairs(ids_kept, order_kept):
        person, _ = pd.factorize(ids_kept, sort=True)
        _, first_at = np.unique(person.astype(np.int64) * len(waves) + order_kept, return_index=True)
        del person
    del pos, keep
    if first_at is None:
        take = kept  # record positions of the long rows (None: every record, in order)
        base_order = order_kept
        whole = every
    else:
        take = first_at if every else kept[first_at]
        base_order = order_kept[first_at]
        whole = len(take) == len(rec) and bool(np.all(take == np.arange(len(take))))
    # the usual file: every record is a long row, in order; then the long table shares the read
    # columns that cleaning leaves as they are (through pandas, so copy-on-write keeps them apart)
    id_column = rec[panel.id] if whole else None
    base_id = id_column.to_numpy() if whole else (ids_kept if first_at is None else ids_kept[first_at])
    n_long = len(rec) if whole else len(take)
    del ids_kept, order_kept, kept, first_at
    wave_values = np.empty(len(waves), dtype=object)
    wave_values[:] = waves
    if _wave_dtype(cb.study.waves) == "int64":
        raw_wave = rec[WAVE_RAW]
        if whole and raw_wave.dtype == np.int64 and _waves_as_read(raw_wave.to_numpy(), waves):
            wave_column = raw_wave.reset_index(drop=True)  # every record's wave as read: shared, not copied
        else:
            wave_column = np.asarray(waves, dtype=np.int64)[base_order]
    else:
        wave_column = pd.Series(wave_values[base_order], dtype=object).to_numpy()
    columns = {panel.id: id_column.reset_index(drop=True) if whole else base_id, panel.wave: wave_column}
    reasons: list[tuple] = []  # per variable with codes met: ids, waves, (variable, code) numbers
    reason_keys: list[tuple] = []
    for var in cb.file_variables():
        if var.name == panel.wave:
            continue
        if var.name not in rec.columns:
            raw = pd.Series([np.nan] * n_long)
        elif whole:
            raw = rec[var.name].reset_index(drop=True)
        else:
            raw = rec[var.name].iloc[take].reset_index(drop=True)
        values, idx, kinds = _cleaned_column(raw, var)
        shared = isinstance(values, np.ndarray) and values.dtype == raw.dtype \
            and np.may_share_memory(values, raw.to_numpy())
        columns[var.name] = raw if shared else values
        if len(idx):
            # the reasons table holds text by (variable, code): numbered here, written out once below
            first = len(reason_keys)
            reason_keys.extend((var.name, str(_fmt_code(c)), var.missing.get(c, "")) for c in var.missing)
            reasons.append((base_id[idx], wave_values[base_order[idx]], kinds + first))
        del raw, values, idx, kinds
    for var in cb.data_variables():
        if var.derived:
            columns[var.name] = derive_values(columns[var.derived_from], columns[panel.wave], var.transform)[0]
    long = pd.DataFrame(columns, copy=False)
    for name, col in columns.items():
        if isinstance(col, pd.Categorical):
            long[name] = col
    if reasons:
        which = np.concatenate([r[2] for r in reasons])
        missing = pd.DataFrame({
            "id": np.concatenate([r[0] for r in reasons]),
            "wave": np.concatenate([r[1] for r in reasons]),
            "variable": _text_take([k[0] for k in reason_keys], which),
            "code": _text_take([k[1] for k in reason_keys], which),
            "reason": _text_take([k[2] for k in reason_keys], which),
        })
        del which
    else:
        missing = pd.DataFrame({"id": [], "wave": [], "variable": [], "code": [], "reason": []})
    files = rec[FILE] if whole else rec[FILE].iloc[take].reset_index(drop=True)
    origin = pd.DataFrame({FILE: files.to_numpy(dtype=object) if files.dtype == object else files.array,
                           ROW: rec[ROW].to_numpy() if whole else rec[ROW].to_numpy()[take]}, copy=False)
    return long, missing, origin


def _waves_as_read(raw: np.ndarray, waves: list) -> bool:
    """True when every distinct value of an integer wave column is the codebook wave it stands for
    (so the tidy wave column equals the column as read)."""
    distinct = _distinct_values(raw)
    if distinct is None:
        return False
    lookup: dict = {}
    for w in waves:
        lookup[wave_key(w)] = w  # a later wave with the same key wins, as in wave_positions
    return all(type(v) is int and type(lookup.get(wave_key(v))) is int and lookup.get(wave_key(v)) == v
               for v in distinct)


def _text_take(distinct: list, at: np.ndarray):
    """``[distinct[i] for i in at]`` as the column pandas makes of it (its text type for text), built by
    one take from the few distinct values rather than a conversion per cell."""
    values = np.empty(len(distinct), dtype=object)
    values[:] = distinct
    dtype = pd.Series(values).dtype  # the type pandas gives these values
    if isinstance(dtype, pd.api.extensions.ExtensionDtype):
        return pd.array(values, dtype=dtype).take(at)
    return values[at]


def _sorted_pairs(ids: np.ndarray, order: np.ndarray) -> bool:
    """True when number ids come sorted and each (id, wave order) pair once, in order (the sort
    of the pairs would keep every record where it is; no need to sort)."""
    if ids.dtype.kind not in "iu" or len(ids) < 2:
        return False
    step = ids[1:] != ids[:-1]
    return bool(np.all(ids[1:] >= ids[:-1])) and bool(np.all(step | (order[1:] > order[:-1])))


def _cleaned_column(raw: pd.Series, var: Variable):
    """The cleaned column of :func:`_clean_values`, the positions that held a declared missing
    code and which code each held (its place in ``var.missing``).

    A number column checked against number codes is cleaned in place of a float copy (no object
    array per cell); a float column without any code met is handed on as read (no copy).
    """
    values = raw.to_numpy()
    hits = code_positions(raw, var)
    if var.type in ("integer", "number") and values.dtype.kind in "iuf" and hits is not None:
        idx, kinds = hits
        out = values.astype(float, copy=len(idx) > 0)
        if len(idx):
            out[idx] = np.nan
        return out, idx, kinds
    if hits is not None and not len(hits[0]):  # no code met: nothing to blank out
        return _typed_values(raw, var), np.zeros(0, dtype=np.int64), np.zeros(0, dtype=np.int64)
    del hits
    values, hit, is_code = _clean_values(raw, var)
    idx = np.flatnonzero(is_code)
    place = {c: k for k, c in enumerate(var.missing)}
    return values, idx, np.asarray([place[c] for c in hit.to_numpy()[idx]], dtype=np.int64)


def _wave_dtype(waves) -> str | None:
    return "int64" if all(isinstance(w, (int, np.integer)) and not isinstance(w, bool) for w in waves) else object


def _fmt_code(c):
    if isinstance(c, float) and c.is_integer():
        return int(c)
    return c


def derive_values(source, waves, transform: str):
    """A declared transformation of cleaned values (NaN stays NaN).

    Parameters
    ----------
    source : array of float
        The cleaned source variable (missing codes already NaN).
    waves : array
        The wave of each value (for ``standardise_wave``).
    transform : str
        One of :data:`wavetrail.codebook.TRANSFORMS`.

    Returns
    -------
    (values, invalid)
        The derived values (float; NaN where missing or invalid) and a boolean
        mask of values outside the transform's domain (``log`` of x <= 0,
        ``log1p`` of x <= -1, ``sqrt`` of x < 0), which the checks report.
    """
    x = np.asarray(source, dtype=float)
    ok = np.isfinite(x)
    invalid = np.zeros(x.shape, dtype=bool)
    out = np.full(x.shape, np.nan)
    if transform == "log":
        invalid = ok & (x <= 0)
        good = ok & ~invalid
        out[good] = np.log(x[good])
    elif transform == "log1p":
        invalid = ok & (x <= -1)
        good = ok & ~invalid
        out[good] = np.log1p(x[good])
    elif transform == "sqrt":
        invalid = ok & (x < 0)
        good = ok & ~invalid
        out[good] = np.sqrt(x[good])
    elif transform in ("standardise_wave", "standardise_all"):
        groups = pd.Series(np.asarray(waves, dtype=object)).map(str).to_numpy() if transform == "standardise_wave" \
            else np.zeros(len(x), dtype=object)
        for g in pd.unique(groups):
            m = ok & (groups == g)
            if m.sum() >= 2:
                sd = float(np.std(x[m], ddof=1))
                if sd > 0:
                    out[m] = (x[m] - float(np.mean(x[m]))) / sd
    else:
        raise DataError(f"unknown transform {transform!r}")
    return out, invalid


def match_missing(raw: pd.Series, var: Variable) -> pd.Series:
    """The declared missing code each value equals (else NaN), as the codebook key."""
    if not var.missing:
        return pd.Series([None] * len(raw), index=raw.index, dtype=object)
    found = missing_code_index(raw, var)
    if found is None:  # a mix of kinds in one column: value by value
        return _match_missing_cells(raw, var)
    declared = np.empty(len(var.missing) + 1, dtype=object)
    declared[:-1] = list(var.missing)
    declared[-1] = None
    return pd.Series(declared[found], index=raw.index, dtype=object)


def code_positions(raw, var: Variable) -> tuple[np.ndarray, np.ndarray] | None:
    """The cells holding a declared missing code, sorted, and the place in ``var.missing`` of
    the code each holds: :func:`missing_code_index` without a full-length array (few cells hold
    codes). None when the column mixes kinds of values."""
    if not var.missing:
        return np.zeros(0, dtype=np.int64), np.zeros(0, dtype=np.int64)
    values = raw.to_numpy() if isinstance(raw, (pd.Series, pd.Index)) else np.asarray(raw)
    if values.dtype.kind in "iuf" and all(isinstance(c, (int, float)) and not isinstance(c, bool)
                                          for c in var.missing):
        # numbers against number codes, compared as floats; a cell equal to two codes takes the first
        hits = [np.flatnonzero(values == float(code)) for code in var.missing]
        if len(hits) == 1:
            return hits[0].astype(np.int64, copy=False), np.zeros(len(hits[0]), dtype=np.int64)
        idx = np.concatenate(hits).astype(np.int64, copy=False)
        kinds = np.repeat(np.arange(len(hits), dtype=np.int64), [len(h) for h in hits])
        by_cell = np.argsort(idx, kind="stable")  # ties keep the code order
        idx, kinds = idx[by_cell], kinds[by_cell]
        first = np.ones(len(idx), dtype=bool)
        first[1:] = idx[1:] != idx[:-1]
        return idx[first], kinds[first]
    found = missing_code_index(raw, var)
    if found is None:
        return None
    idx = np.flatnonzero(found >= 0)
    return idx, found[idx]


def missing_code_index(raw: pd.Series, var: Variable) -> np.ndarray | None:
    """Per cell, the place in ``var.missing`` of the code :func:`match_missing` finds (-1: none).

    None when the column mixes kinds of values (then only :func:`match_missing` answers).
    """
    if not var.missing:
        return np.full(len(raw), -1, dtype=np.int64)
    values = raw.to_numpy() if isinstance(raw, (pd.Series, pd.Index)) else np.asarray(raw)
    if values.dtype.kind in "iuf" and all(isinstance(c, (int, float)) and not isinstance(c, bool)
                                          for c in var.missing):
        # numbers against number codes: compared as floats, as the distinct-value path compares them
        found = np.full(len(values), -1, dtype=np.int64)
        for k, code in enumerate(var.missing):
            found[(values == float(code)) & (found < 0)] = k
        return found
    fact = factorize_column(raw)
    if fact is None:
        return None
    codes, uniq = fact
    # the matching runs on the distinct values; the first declared code that matches wins
    found = np.full(len(uniq) + 1, -1, dtype=np.int64)
    if uniq:
        u = pd.Series(uniq, dtype=object) if raw.dtype.kind not in "iufb" else pd.Series(np.asarray(uniq))
        num = pd.to_numeric(u, errors="coerce").to_numpy(dtype=float)
        text = None
        for k, code in enumerate(var.missing):
            if isinstance(code, (int, float)) and not isinstance(code, bool):
                hit = num == float(code)
            else:
                if text is None:
                    text = np.asarray([_to_stripped(v) for v in uniq], dtype=object)
                hit = text == str(code)
            found[:-1][hit & (found[:-1] < 0)] = k
    return found[codes]


def _match_missing_cells(raw: pd.Series, var: Variable) -> pd.Series:
    out = pd.Series([None] * len(raw), index=raw.index, dtype=object)
    num = pd.to_numeric(raw, errors="coerce")
    text = raw.map(_to_stripped)
    for code in var.missing:
        if isinstance(code, (int, float)) and not isinstance(code, bool):
            hit = (num == float(code)).to_numpy()
        else:
            hit = (text == str(code)).to_numpy()
        out[hit & out.isna().to_numpy()] = code
    return out


def clean_values(raw: pd.Series, var: Variable):
    """Raw values -> typed values with declared missing codes as NaN.

    Returns the cleaned column (float array, Categorical, text or datetime)
    and the Series of matched missing codes (None where none matched).
    Values that do not fit the type become NaN (the checks report them).
    """
    values, hit, _ = _clean_values(raw, var)
    return values, hit


def _clean_values(raw: pd.Series, var: Variable):
    """:func:`clean_values` plus the boolean mask of cells that held a declared missing code."""
    found = missing_code_index(raw, var)
    if found is None:  # a column mixing kinds of values: value by value
        hit = match_missing(raw, var)
        is_code = hit.notna().to_numpy()
    else:
        declared = np.empty(len(var.missing) + 1, dtype=object)
        declared[:-1] = list(var.missing)
        declared[-1] = None
        hit = pd.Series(declared[found], index=raw.index, dtype=object)
        is_code = found >= 0
    raw = raw.where(~is_code, None)
    values = _typed_values(raw, var)
    return values, hit, is_code


def _typed_values(raw: pd.Series, var: Variable):
    if var.type in ("integer", "number"):
        return pd.to_numeric(raw, errors="coerce").to_numpy(dtype=float)
    if var.type == "category":
        codes = list(var.levels)
        return _categorical(raw, codes, var.ordered)
    if var.type == "date":
        text = pd.Series(text_column(raw), index=raw.index, dtype=object)
        return pd.to_datetime(text, errors="coerce", format="ISO8601").to_numpy()
    # through a Series, as Series.map gave it: all-text cells become pandas' text type (empty = NaN)
    return pd.Series(text_column(raw)).to_numpy(dtype=object)


def _categorical(raw: pd.Series, codes: list, ordered: bool) -> pd.Categorical:
    """``pd.Categorical([level_of(v, codes) for v in raw], codes, ordered)``, per distinct value."""
    values = raw.to_numpy() if isinstance(raw, (pd.Series, pd.Index)) else np.asarray(raw)
    if values.dtype.kind in "iu" and len(values):
        found = _small_int_index(values)  # integers in a short span: a table of level codes, one look-up per cell
        if found is not None:
            index, base, present = found
            distinct = np.flatnonzero(present)
            levels = np.empty(len(distinct), dtype=object)
            for i, v in enumerate((distinct + base).astype(values.dtype).tolist()):
                levels[i] = level_of(v, codes)
            per_unique = pd.Categorical(levels, categories=codes, ordered=ordered)
            table = np.full(len(present), -1, dtype=per_unique.codes.dtype)
            table[distinct] = per_unique.codes
            return pd.Categorical.from_codes(table[index], dtype=per_unique.dtype)
    fact = factorize_column(raw)
    if fact is None:
        return pd.Categorical(level_column(raw, codes), categories=codes, ordered=ordered)
    cell_codes, uniq = fact
    levels = np.empty(len(uniq) + 1, dtype=object)
    for i, v in enumerate(uniq):
        levels[i] = level_of(v, codes)
    levels[-1] = level_of(None, codes) if raw.dtype.kind != "f" else level_of(float("nan"), codes)
    per_unique = pd.Categorical(levels, categories=codes, ordered=ordered)
    return pd.Categorical.from_codes(per_unique.codes[cell_codes], dtype=per_unique.dtype)


def level_of(value, codes: list):
    """The codebook level a raw value stands for (``2``, ``2.0``, ``"2"`` -> 2), or None."""
    if value is None or (isinstance(value, float) and np.isnan(value)):
        return None
    if value in codes:
        return value
    key = wave_key(value)
    for c in codes:
        if wave_key(c) == key:
            return c
    return None
