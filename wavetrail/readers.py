"""Data files -> tables: CSV/TSV, Excel, SPSS ``.sav``, Stata ``.dta``, Parquet.

:func:`read_table` reads one file into a :class:`RawTable`: the values as
read (numeric columns as numbers, anything else as text), the row number of
each record in its file, and, for labelled SPSS/Stata files, variable labels,
value labels and user-defined missing values. Nothing here knows the
codebook; :mod:`wavetrail.panel` turns tables into the panel.

Every unreadable file raises one :class:`~wavetrail.errors.DataError` naming
the file (and the line where it can): an empty file, a file that is not
UTF-8, a wrong delimiter, a corrupt or truncated CSV, repeated column names.
"""

from __future__ import annotations

import csv
import io
import os
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from wavetrail.errors import DataError

__all__ = ["RawTable", "read_table", "table_from_frame", "FORMATS", "MISSING_TOKENS", "DELIMITERS"]

#: file suffix -> reader format
FORMATS = {
    ".csv": "csv", ".tsv": "csv", ".tab": "csv", ".txt": "csv",
    ".xlsx": "excel", ".xlsm": "excel", ".xls": "excel",
    ".sav": "spss", ".zsav": "spss",
    ".dta": "stata",
    ".parquet": "parquet", ".pq": "parquet",
}
#: text cells read as an empty value in delimited files
MISSING_TOKENS = frozenset({"", "NA", "N/A", "NaN", "nan", "."})
#: delimiters tried when sniffing a delimited text file
DELIMITERS = (",", ";", "\t", "|")
_SNIFF_LINES = 200


@dataclass
class RawTable:
    """One data file as read.

    Attributes
    ----------
    path : Path or None
        The file (None for a DataFrame handed in directly).
    frame : DataFrame
        One row per record; numeric columns as numbers, others as text.
    rows : ndarray of int
        The record's place in its file: the line number for text files, the
        spreadsheet row for Excel, the 1-based case number otherwise.
    labels, value_labels, user_missing : dict
        Variable labels, value labels ({code: label}) and user-defined
        missing values ({code: label or ""}) by column, from SPSS/Stata files.
    """

    path: Path | None
    frame: pd.DataFrame
    rows: np.ndarray
    format: str = "frame"
    labels: dict = field(default_factory=dict)
    value_labels: dict = field(default_factory=dict)
    user_missing: dict = field(default_factory=dict)
    #: workbooks: the sheet that was read and every sheet of the file, in order
    sheet: str | None = None
    sheets: tuple = ()

    @property
    def name(self) -> str:
        """The file name for messages (``<data frame>`` for in-memory tables)."""
        return self.path.name if self.path is not None else "<data frame>"


def read_table(path: str | os.PathLike, *, delimiter: str | None = None) -> RawTable:
    """Read one data file.

    Parameters
    ----------
    path : path-like
        A ``.csv``/``.tsv``/``.txt``, ``.xlsx``, ``.sav``, ``.dta`` or
        ``.parquet`` file.
    delimiter : str, optional
        For delimited text: the delimiter. Sniffed among ``, ; tab |`` when
        not given.

    Returns
    -------
    RawTable

    Raises
    ------
    DataError
        The file is missing, empty, of an unknown kind or cannot be read; the
        message names the file and, for text files, the line.
    """
    path = Path(path)
    if not path.exists():
        raise DataError(f"data file {path} does not exist", hint="check the `data:` list in config/config.yaml")
    if path.is_dir():
        raise DataError(f"data file {path} is a folder, not a file")
    fmt = FORMATS.get(path.suffix.lower())
    if fmt is None:
        raise DataError(f"{path}: unknown data file kind {path.suffix!r}",
                        hint="use .csv, .tsv, .xlsx, .sav, .dta or .parquet")
    if path.stat().st_size == 0:
        raise DataError(f"{path}: the file is empty", hint="copy the data file again")
    if fmt == "csv":
        return _read_delimited(path, delimiter)
    if fmt == "excel":
        return _read_excel(path)
    if fmt in ("spss", "stata"):
        return _read_labelled(path, fmt)
    return _read_parquet(path)


# --------------------------------------------------------------------------- delimited text


def _read_delimited(path: Path, delimiter: str | None) -> RawTable:
    raw = path.read_bytes()
    if not raw.strip():
        raise DataError(f"{path}: the file is empty (only blank space)", hint="copy the data file again")
    if b"\x00" in raw:
        line = raw[: raw.index(b"\x00")].count(b"\n") + 1
        raise DataError(f"{path}:{line}: the file holds NUL bytes; it is binary or corrupt",
                        hint="export the data again as UTF-8 CSV")
    try:
        text = raw.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        line = raw[: exc.start].count(b"\n") + 1
        raise DataError(f"{path}:{line}: the file is not UTF-8 text (byte 0x{raw[exc.start]:02x} "
                        f"at offset {exc.start})",
                        hint="save it as UTF-8 (it may be Latin-1 or Windows-1252)") from None
    lines = text.splitlines()
    while lines and not lines[-1].strip():
        lines.pop()
    if not lines:
        raise DataError(f"{path}: the file is empty", hint="copy the data file again")
    if delimiter is None:
        delimiter = _sniff(lines[:_SNIFF_LINES], tab_first=path.suffix.lower() in (".tsv", ".tab"))
    header, records, numbers = _parse(path, lines, delimiter)
    return _to_table(path, header, records, numbers)


def _field_counts(lines: list[str], delimiter: str) -> list[int]:
    """Fields per line, each line parsed alone (-1 where a line does not parse)."""
    counts = []
    for line in lines:
        try:
            row = next(csv.reader([line], delimiter=delimiter, strict=True), [])
        except csv.Error:
            row = None
        if row == []:
            continue
        counts.append(-1 if row is None else len(row))
    return counts


def _sniff(lines: list[str], tab_first: bool) -> str:
    order = ("\t",) + tuple(d for d in DELIMITERS if d != "\t") if tab_first else DELIMITERS
    best, best_key = order[0], None
    for d in order:
        counts = _field_counts(lines, d)
        if not counts:
            continue
        header = counts[0]
        consistent = sum(c == header for c in counts) / len(counts)
        key = (header > 1, consistent, header)
        if best_key is None or key > best_key:
            best, best_key = d, key
    return best


def _parse(path: Path, lines: list[str], delimiter: str):
    records: list[list[str]] = []
    numbers: list[int] = []
    reader = csv.reader(io.StringIO("\n".join(lines) + "\n"), delimiter=delimiter, strict=True)
    header: list[str] | None = None
    try:
        for row in reader:
            if not row or (len(row) == 1 and not row[0].strip()):
                continue
            if header is None:
                header = [h.strip() for h in row]
                header_line = reader.line_num
                continue
            records.append(row)
            numbers.append(reader.line_num)
    except csv.Error as exc:
        raise DataError(f"{path}:{reader.line_num}: the file cannot be parsed ({exc}); "
                        "it looks corrupt or truncated (an unclosed quote?)",
                        hint="export the data again") from None
    assert header is not None
    name_d = {",": "comma", ";": "semicolon", "\t": "tab", "|": "bar"}
    if len(header) == 1:
        others = [d for d in DELIMITERS if d != delimiter and d in header[0]]
        if others:
            raise DataError(f"{path}:{header_line}: the header is one column with the delimiter "
                            f"{name_d.get(delimiter, repr(delimiter))}, but it holds "
                            f"{name_d.get(others[0], repr(others[0]))}s: the delimiter is wrong",
                            hint=f"the file seems to be separated by {name_d.get(others[0], others[0])}s")
    for row, line in zip(records, numbers):
        if len(row) != len(header):
            hint = "export the data again; a truncated copy ends in a short line"
            if len(row) == 1 and any(d in row[0] for d in DELIMITERS if d != delimiter):
                hint = "the header and the rows use different delimiters"
            raise DataError(f"{path}:{line}: the line has {len(row)} field(s) but the header has "
                            f"{len(header)}: the file is corrupt, truncated or uses a different delimiter",
                            hint=hint)
    seen: dict[str, int] = {}
    for i, h in enumerate(header):
        if h in seen and h:
            raise DataError(f"{path}:{header_line}: column {h!r} appears twice in the header "
                            f"(fields {seen[h] + 1} and {i + 1})", hint="rename or drop one of them")
        seen[h] = i
    return header, records, numbers


def _to_table(path: Path, header: list[str], records: list[list[str]], numbers: list[int]) -> RawTable:
    columns: dict[str, pd.Series] = {}
    for j, name in enumerate(header):
        values = [r[j].strip() for r in records]
        if not name:
            if all(v in MISSING_TOKENS for v in values):
                continue  # trailing delimiter: an empty, unnamed column
            raise DataError(f"{path}:1: field {j + 1} of the header has no name but holds values",
                            hint="give the column a name")
        columns[name] = _convert(values)
    frame = pd.DataFrame(columns, index=pd.RangeIndex(len(records)))
    return RawTable(path=path, frame=frame, rows=np.asarray(numbers, dtype=np.int64), format="csv")


def _convert(values: list[str]) -> pd.Series:
    """Text cells -> numbers when every filled cell is a number, else text (missing = NaN)."""
    s = pd.Series([None if v in MISSING_TOKENS else v for v in values], dtype=object)
    filled = s.notna()
    if not filled.any():
        return pd.Series(np.full(len(s), np.nan))
    num = pd.to_numeric(s[filled], errors="coerce")
    if num.notna().all():
        out = pd.Series(np.full(len(s), np.nan))
        out[filled.to_numpy()] = num.to_numpy(dtype=float)
        return _maybe_int(out)
    return s


def _maybe_int(s: pd.Series) -> pd.Series:
    """Whole numbers without gaps as int64 (ids stay ``17``, not ``17.0``)."""
    v = s.to_numpy(dtype=float)
    if len(v) and np.isfinite(v).all() and np.all(v == np.round(v)) and np.abs(v).max() < 2**53:
        return pd.Series(v.astype(np.int64))
    return s


# --------------------------------------------------------------------------- other formats


def _read_excel(path: Path) -> RawTable:
    try:
        with pd.ExcelFile(path) as book:
            sheets = tuple(str(n) for n in book.sheet_names)
            frame = pd.read_excel(book, sheet_name=0)
    except ImportError as exc:
        raise DataError(f"{path}: reading Excel files needs openpyxl ({exc})",
                        hint="pip install openpyxl") from None
    except Exception as exc:  # zip/xml errors of a corrupt workbook
        raise DataError(f"{path}: the workbook cannot be read ({type(exc).__name__}: {exc})",
                        hint="open and save it again, or export the sheet as CSV") from None
    frame = _tidy_frame(path, frame, header_line=1)
    return RawTable(path=path, frame=frame, rows=np.arange(2, len(frame) + 2, dtype=np.int64), format="excel",
                    sheet=sheets[0] if sheets else None, sheets=sheets)


def has_records(path: str | os.PathLike) -> bool:
    """True when a data file holds at least one record below its header.

    Delimited text is judged from its first lines without parsing the whole
    file; other formats are read.
    """
    path = Path(path)
    if FORMATS.get(path.suffix.lower()) == "csv":
        seen = 0
        with open(path, "rb") as fh:
            for line in fh:
                if line.strip():
                    seen += 1
                    if seen >= 2:
                        return True
        if seen == 0:
            read_table(path)  # raises its own message for an empty file
        return False
    return len(read_table(path).frame) > 0


def _read_labelled(path: Path, fmt: str) -> RawTable:
    import pyreadstat

    reader = pyreadstat.read_sav if fmt == "spss" else pyreadstat.read_dta
    try:
        frame, meta = reader(str(path), user_missing=True)
    except Exception as exc:  # pyreadstat.ReadstatError and friends
        kind = "SPSS" if fmt == "spss" else "Stata"
        raise DataError(f"{path}: the {kind} file cannot be read ({exc})",
                        hint="save it again from the statistics package") from None
    labels = {k: v for k, v in (meta.column_names_to_labels or {}).items() if v}
    value_labels = {k: {_code(c): str(lab) for c, lab in v.items()}
                    for k, v in (meta.variable_value_labels or {}).items()}
    user_missing: dict[str, dict] = {}
    for name, ranges in (getattr(meta, "missing_ranges", None) or {}).items():
        codes = user_missing.setdefault(name, {})
        for r in ranges:
            lo, hi = r.get("lo"), r.get("hi")
            if lo == hi:
                codes[_code(lo)] = value_labels.get(name, {}).get(_code(lo), "")
            else:  # a range of codes: keep its ends, say so in the label
                codes[_code(lo)] = f"range {lo} to {hi}"
                codes[_code(hi)] = f"range {lo} to {hi}"
    for name, vals in (getattr(meta, "missing_user_values", None) or {}).items():
        codes = user_missing.setdefault(name, {})
        for v in vals:
            codes[_code(v)] = value_labels.get(name, {}).get(_code(v), "")
    frame = _tidy_frame(path, frame, header_line=None)
    return RawTable(path=path, frame=frame, rows=np.arange(1, len(frame) + 1, dtype=np.int64),
                    format=fmt, labels=labels, value_labels=value_labels, user_missing=user_missing)


def _read_parquet(path: Path) -> RawTable:
    try:
        frame = pd.read_parquet(path)
    except Exception as exc:  # pyarrow.ArrowInvalid for a corrupt file
        raise DataError(f"{path}: the Parquet file cannot be read ({type(exc).__name__}: {exc})",
                        hint="write the file again") from None
    frame = _tidy_frame(path, frame, header_line=None)
    return RawTable(path=path, frame=frame, rows=np.arange(1, len(frame) + 1, dtype=np.int64), format="parquet")


def _code(v):
    """A label code as int when it is whole (SPSS stores 1 as 1.0)."""
    if isinstance(v, float) and v.is_integer():
        return int(v)
    return v


def _tidy_frame(path: Path, frame: pd.DataFrame, header_line: int | None) -> pd.DataFrame:
    names = [str(c).strip() for c in frame.columns]
    seen: set[str] = set()
    for n in names:
        if n in seen:
            raise DataError(f"{path}: column {n!r} appears twice", hint="rename or drop one of them")
        seen.add(n)
    frame = frame.copy()
    frame.columns = names
    frame = frame.reset_index(drop=True)
    out = {}
    for name in names:
        col = frame[name]
        if isinstance(col.dtype, pd.CategoricalDtype):
            col = col.astype(object)
        if pd.api.types.is_bool_dtype(col):
            col = col.astype(float)
        if pd.api.types.is_numeric_dtype(col):
            out[name] = _maybe_int(pd.Series(col.to_numpy(dtype=float)))
        elif pd.api.types.is_datetime64_any_dtype(col):
            out[name] = col.dt.strftime("%Y-%m-%d").astype(object).where(col.notna(), None)
        else:
            values = ["" if v is None or (isinstance(v, float) and np.isnan(v)) else str(v).strip()
                      for v in col.tolist()]
            out[name] = _convert(values)
    return pd.DataFrame(out, index=pd.RangeIndex(len(frame)))


def table_from_frame(frame: pd.DataFrame, name: str | None = None) -> RawTable:
    """Wrap an in-memory DataFrame as a :class:`RawTable` (rows numbered from 1)."""
    tidy = _tidy_frame(Path(name or "<data frame>"), frame, header_line=None)
    return RawTable(path=Path(name) if name else None, frame=tidy,
                    rows=np.arange(1, len(tidy) + 1, dtype=np.int64))
