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

import codecs
import csv
import io
import os
import warnings
from concurrent.futures import ThreadPoolExecutor
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
    if path.stat().st_size >= FAST_BYTES:
        # scanned in pieces and parsed from the path: the file's bytes are never held whole
        table = _read_delimited_columnar(path, delimiter)
        if table is not None:
            return table
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
    del raw
    lines = text.splitlines()
    while lines and not lines[-1].strip():
        lines.pop()
    if not lines:
        raise DataError(f"{path}: the file is empty", hint="copy the data file again")
    if delimiter is None:
        delimiter = _sniff(lines[:_SNIFF_LINES], tab_first=path.suffix.lower() in (".tsv", ".tab"))
    header, records, numbers = _parse(path, lines, delimiter)
    return _to_table(path, header, records, numbers)


#: delimited files from this size on are parsed column by column (pandas' C parser)
FAST_BYTES = 4 << 20
#: characters at the start of a file where the delimiter is sniffed (the first 200 lines must fit)
_HEAD_CHARS = 1 << 20
#: bytes read and scanned at once when counting lines, delimiters and blank lines
_SCAN_BYTES = 32 << 20
#: characters Python's str.splitlines() also takes as line ends (besides \n and \r\n)
#: (the ASCII ones first)
_ODD_BREAKS = (b"\x0b", b"\x0c", b"\x1c", b"\x1d", b"\x1e", b"\xc2\x85", b"\xe2\x80\xa8", b"\xe2\x80\xa9")


def _pieces(path: Path, size: int):
    """The file in pieces of about ``size`` bytes, each ending just after a ``\\n`` (the last one may not)."""
    with open(path, "rb") as fh:
        carry = b""
        while True:
            block = fh.read(size)
            if not block:
                if carry:
                    yield carry
                return
            buf = carry + block if carry else block
            cut = buf.rfind(b"\n")
            if cut < 0:  # a line longer than a piece: read on
                carry = buf
                continue
            yield buf[:cut + 1] if cut + 1 < len(buf) else buf
            carry = buf[cut + 1:]


def _read_delimited_columnar(path: Path, delimiter: str | None) -> RawTable | None:
    """The table :func:`_parse` + :func:`_to_table` give, without a Python object per cell.

    Covers the common large file: UTF-8, ``\\n`` or ``\\r\\n`` line ends, no
    quotes after the header, every line with the header's number of fields,
    distinct named header fields. The file is parsed from its path by pandas'
    C parser, so its bytes are never held whole. Record line numbers: a plain
    file (ASCII, no quote after the header, a ``\\r`` only before ``\\n``) is
    counted in one pass (line ends); when pandas gives one record per line
    after the header, the records are lines 2, 3, ...; a missing value in the
    last column (where a short line would show) has the delimiters counted.
    Anything else is scanned piece by piece (line ends, blank lines,
    delimiters, quotes, UTF-8). Returns None for anything else (the caller
    then parses line by line, which also words every error message).
    """
    with open(path, "rb") as fh:
        first_bytes = fh.read(4 * _HEAD_CHARS + 3)
    try:  # a character cut at the end of the first bytes waits for more (final=False)
        text = codecs.getincrementaldecoder("utf-8-sig")("strict").decode(first_bytes, final=False)
    except UnicodeDecodeError:
        return None
    head = text[:_HEAD_CHARS].splitlines()
    if len(head) <= _SNIFF_LINES:
        return None
    if delimiter is None:
        delimiter = _sniff(head[:_SNIFF_LINES], tab_first=path.suffix.lower() in (".tsv", ".tab"))
    if len(delimiter) != 1 or delimiter in ('"', "\n", "\r", " "):
        return None
    sep = delimiter.encode()
    bom = first_bytes.startswith(b"\xef\xbb\xbf")
    frame = counted = None
    if head[0].strip() and head[1].strip():
        header_bytes, first_rec = head[0].encode("utf-8"), head[1].encode("utf-8")
        header = _header_fields(header_bytes, first_rec, header_bytes.count(b'"'), delimiter)
        if header is None:
            return None
        # the lines are counted in a second thread while pandas parses (both mostly outside the GIL)
        with ThreadPoolExecutor(max_workers=1) as pool:
            counting = pool.submit(_count_plain_lines, path, bom)
            frame = _parse_columns(path, delimiter, header)
            counted = counting.result()
        if counted is not None and counted[1] != header_bytes.count(b'"'):
            return None  # a quote after the header
        if frame is None:
            return None
    if counted is not None:
        n_lines, _ = counted
        if len(frame) == n_lines - 1:
            # pandas skips blank lines and, without quotes, makes at most one record of a line: as many
            # records as lines after the header means every one of them is a record
            if len(frame) and frame[header[-1]].isna().to_numpy().any():
                # a short line ends in a missing value: the delimiters tell (each record holds
                # len(header) - 1; no line is longer, pandas refuses those)
                if _count_byte(path, sep) - header_bytes.count(sep) != len(frame) * (len(header) - 1):
                    return None
            rows = np.arange(2, n_lines + 1, dtype=np.int64)
            return _columnar_table(path, delimiter, header, frame, rows)
        # a blank line somewhere: the line scan below numbers the records
    scanned = _scan_lines(path, bom, sep)
    if scanned is None:
        return None
    line_no, header_bytes, first_rec, n_quotes, n_seps = scanned
    header = _header_fields(header_bytes, first_rec, n_quotes, delimiter)
    if header is None:
        return None
    rows = line_no[1:]
    if n_seps - header_bytes.count(sep) != len(rows) * (len(header) - 1):
        return None  # a short or long line: the line-by-line parse names it
    if frame is None or list(frame.columns) != header:
        frame = _parse_columns(path, delimiter, header)
        if frame is None:
            return None
    if len(frame) != len(rows):
        return None
    return _columnar_table(path, delimiter, header, frame, rows)


def _count_plain_lines(path: Path, bom: bool) -> tuple[int, int] | None:
    """Lines and quotes of a plain file in one pass: ASCII, no NUL, no line break Python's
    ``str.splitlines`` takes besides ``\\n`` and ``\\r\\n``, every ``\\r`` before a ``\\n``.
    None for any other file (then :func:`_scan_lines` looks line by line)."""
    n_nl = n_quotes = 0
    cr_open = False  # the last block ended in \r: the next must start with \n
    last = b"\n"
    with open(path, "rb") as fh:
        k = 0
        while True:
            block = fh.read(_SCAN_BYTES)
            if not block:
                break
            if k == 0 and bom:
                block = block[3:]
            k += 1
            if not block:
                continue
            if cr_open and block[:1] != b"\n":
                return None
            if not block.isascii() or b"\x00" in block or any(b in block for b in _ODD_BREAKS[:5]):
                return None
            if b"\r" in block:
                n_cr = block.count(b"\r")
                cr_open = block.endswith(b"\r")
                if n_cr != block.count(b"\r\n") + cr_open:
                    return None
            else:
                cr_open = False
            if b'"' in block:
                n_quotes += block.count(b'"')
            n_nl += int(np.count_nonzero(np.frombuffer(block, dtype=np.uint8) == 10))  # (numpy lets go of the GIL)
            last = block[-1:]
    if cr_open:
        return None
    return n_nl + (last != b"\n"), n_quotes


def _count_byte(path: Path, byte: bytes) -> int:
    """How often ``byte`` (ASCII, so never part of a byte order mark) occurs in the file."""
    n = 0
    with open(path, "rb") as fh:
        while True:
            block = fh.read(_SCAN_BYTES)
            if not block:
                return n
            n += block.count(byte)


def _header_fields(header_bytes: bytes, first_rec: bytes, n_quotes: int, delimiter: str) -> list | None:
    """The header's field names when the file suits the columnar reader (else None): no quote
    after the header, distinct named fields, the first record with as many fields as the header."""
    if n_quotes != header_bytes.count(b'"'):
        return None
    header_text = header_bytes.decode("utf-8")
    try:
        header = [h.strip() for h in next(csv.reader([header_text], delimiter=delimiter, strict=True))]
    except (csv.Error, StopIteration):
        return None
    if len(header) < 2 or "" in header or len(set(header)) != len(header):
        return None
    # every record holds len(header) - 1 delimiters: the first one checked alone (it sets how many
    # fields the C parser expects, which then refuses longer lines); the callers check the sum over
    # all of them where a short line could hide (no line longer, so none shorter)
    if first_rec.count(delimiter.encode()) != len(header) - 1:
        return None
    return header


def _scan_lines(path: Path, bom: bool, sep: bytes):
    """Line numbers of the lines holding a record or the header, the header and first record
    lines, and the counts of quotes and delimiters, scanned piece by piece; None for a file the
    columnar reader does not take (NUL, odd line breaks, a lone ``\\r``, not UTF-8)."""
    d = sep[0]
    # per line: whether it holds a record (more than blank space, or a delimiter)
    filled: list[np.ndarray] = []
    header_bytes = first_rec = None
    n_quotes = n_seps = 0
    for k, piece in enumerate(_pieces(path, _SCAN_BYTES)):
        if k == 0 and bom:
            piece = piece[3:]
        if not piece:
            continue
        ascii_only = piece.isascii()
        odd = _ODD_BREAKS[:5] if ascii_only else _ODD_BREAKS
        if b"\x00" in piece or any(b in piece for b in odd):
            return None
        if not ascii_only:
            try:
                piece.decode("utf-8")
            except UnicodeDecodeError:
                return None
        buf = np.frombuffer(piece, dtype=np.uint8)
        nl = np.flatnonzero(buf == 10)
        # every \r ends a line as \r\n
        n_cr = np.count_nonzero(buf == 13)
        if n_cr and n_cr != np.count_nonzero(buf[nl[nl > 0] - 1] == 13):
            return None
        if b'"' in piece:
            n_quotes += piece.count(b'"')
        n_seps += np.count_nonzero(buf == d)
        if not len(nl) or nl[-1] != len(buf) - 1:
            nl = np.append(nl, len(buf))  # a last line without a line end
        starts = np.concatenate(([0], nl[:-1] + 1))
        first = buf[np.minimum(starts, len(buf) - 1)]
        if not np.any((first == 10) | (first == 13) | (first == 32) | (first == 9)):
            # no line empty or starting blank: every line holds a record (no per-line look needed)
            if first_rec is None:
                for i in range(min(2, len(nl))):  # (not piece.split, which copies the rest of the piece)
                    line = piece[int(starts[i]):int(nl[i])].rstrip(b"\r")
                    if header_bytes is None:
                        header_bytes = line
                    elif first_rec is None:
                        first_rec = line
            filled.append(np.ones(len(nl), dtype=bool))
            continue
        length = nl - starts
        full = (length > 1) | ((length == 1) & (first != 13))  # not empty, not a lone \r
        # a line of blank space starts with one; look at those few lines one by one
        doubt = np.flatnonzero(full & ((first == 32) | (first == 9)))
        if len(doubt) > 100_000:  # many lines start blank: count blank bytes per line instead
            blank = (buf == 32) | (buf == 9) | (buf == 13)
            n_blank = np.add.reduceat(blank, starts, dtype=np.int64)
            n_delim = np.add.reduceat(buf == d, starts, dtype=np.int64)
            full &= (length > n_blank) | (n_delim > 0)
        else:
            for i in doubt.tolist():
                line = piece[int(starts[i]):int(nl[i])]
                if not line.strip(b" \t\r") and sep not in line:
                    full[i] = False
        if first_rec is None:
            for i in np.flatnonzero(full)[:2].tolist():
                line = piece[int(starts[i]):int(nl[i])].rstrip(b"\r")
                if header_bytes is None:
                    header_bytes = line
                elif first_rec is None:
                    first_rec = line
        filled.append(full)
        del buf
    if header_bytes is None or first_rec is None:
        return None
    line_no = np.flatnonzero(np.concatenate(filled)) + 1  # 1-based numbers of the lines that hold a record or the header
    return line_no, header_bytes, first_rec, n_quotes, n_seps


def _parse_columns(path: Path, delimiter: str, header: list) -> pd.DataFrame | None:
    """pandas' C parse of the file with ``header`` as names (None when pandas refuses it)."""
    try:
        with warnings.catch_warnings():  # mixed kinds in one column: read again as text below
            warnings.simplefilter("ignore")
            return pd.read_csv(path, sep=delimiter, header=0, names=header, encoding="utf-8-sig",
                               na_values=sorted(MISSING_TOKENS), keep_default_na=False, skip_blank_lines=True,
                               engine="c", skipinitialspace=False)
    except Exception:  # noqa: BLE001 - any parser complaint: the line-by-line parse words it
        return None


def _columnar_table(path: Path, delimiter: str, header: list, frame: pd.DataFrame,
                    rows: np.ndarray) -> RawTable | None:
    """The RawTable of a parsed frame: text columns read again as text cells and converted."""
    text_cols = [c for c in header if frame[c].dtype.kind not in "iuf"]
    texts = None
    if text_cols:
        try:
            texts = pd.read_csv(path, sep=delimiter, header=0, names=header, encoding="utf-8-sig",
                                usecols=text_cols, dtype=object, keep_default_na=False, na_filter=False,
                                skip_blank_lines=True, engine="c")
        except Exception:  # noqa: BLE001
            return None
        if len(texts) != len(rows):
            return None
    columns: dict[str, object] = {}
    for name in header:  # number columns stay views of the parser's blocks (no copy)
        if name in text_cols:
            columns[name] = _convert_cells(texts[name].to_numpy(dtype=object))
        else:
            columns[name] = _typed_numbers(frame[name].to_numpy())
    del frame, texts
    # one block per column (no copy into one 2-D block of all columns)
    out = pd.DataFrame(columns, index=pd.RangeIndex(len(rows)), copy=False)
    return RawTable(path=path, frame=out, rows=rows.astype(np.int64, copy=False), format="csv")


#: values looked at first when deciding whether a float column holds whole numbers only
_HEAD_VALUES = 4096


def _typed_numbers(values: np.ndarray) -> np.ndarray:
    """:func:`_maybe_int` of a parsed number column, on the array (no Series, no copy of an integer column)."""
    if values.dtype == np.int64 and len(values) and max(-int(values.min()), int(values.max())) < 2**53:
        return values
    v = values.astype(float, copy=False)
    head = v[:_HEAD_VALUES]  # a gap or a fraction among the first values settles it without a pass over all
    if not (np.isfinite(head).all() and np.all(head == np.round(head))):
        return v
    if len(v) and np.isfinite(v).all() and np.all(v == np.round(v)) and np.abs(v).max() < 2**53:
        return v.astype(np.int64)
    return v


def _convert_cells(cells: np.ndarray) -> pd.Series:
    """:func:`_convert` of an object array of text cells (stripped, per distinct value)."""
    codes, uniq = pd.factorize(cells, use_na_sentinel=True)
    clean = np.empty(len(uniq) + 1, dtype=object)
    for i, v in enumerate(uniq):
        t = str(v).strip()
        clean[i] = None if t in MISSING_TOKENS else t
    clean[-1] = None
    # numbers when every filled cell is a number (to_numeric works value by value: run it on the distinct ones)
    present = np.asarray([c is not None for c in clean], dtype=bool)
    if not present[codes].any():
        return pd.Series(np.full(len(cells), np.nan))
    num = pd.to_numeric(pd.Series(clean[present], dtype=object), errors="coerce").to_numpy(dtype=float)
    if np.isnan(num).any():
        return pd.Series(clean[codes], dtype=object)
    values = np.full(len(clean), np.nan)
    values[present] = num
    return _maybe_int(pd.Series(values[codes]))


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
    return _convert_series(pd.Series([None if v in MISSING_TOKENS else v for v in values], dtype=object))


def _convert_series(s: pd.Series) -> pd.Series:
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
        from wavetrail._textscan import count_nonblank_lines

        seen = count_nonblank_lines(path)
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
