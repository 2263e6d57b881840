"""Disclosure check: what an archive's outputs could reveal about the people in the study.

Four checks, each finding naming the file, the column and the row:

``identifier column``
    An output table has a column named like a codebook variable marked
    ``identifier: true`` (always blocks).
``identifier value``
    A value of an identifier variable (an e-mail address, a name, ...)
    appears anywhere in a text file, in any letter case: tables, JSON,
    notebooks, HTML, SVG, Markdown, YAML (always blocks).
``raw row``
    A row of a table repeats a real data row that is unique in the raw data
    over at least three of its variables, or differs from such a row in one
    cell only (a near-copy) when the table shares at least four variables
    with the data; declared missing codes count as missing (blocks when the
    raw data stay out of the archive).
``person ids``
    Text names real person ids after the id column's name (``pid 10186``;
    blocks when the raw data stay out of the archive), or an output table is
    keyed by the study's person ids (e.g. per-person scores). With the raw data in the archive this adds nothing (``note``);
    without it, such outputs under ``results/`` are person-level data too and
    are withheld from the archive (hash only), like the raw files; any other
    file keyed by person ids (a copy of the data under ``docs/``,
    ``data/interim/``, ...) blocks.
``small cell``
    A count below the threshold ``min_cell`` (``wavetrail pack --min-cell``,
    else the project's ``report.min_cell``, else 5; suppressing counts below a
    threshold such as 5 or 10 is common practice in statistical disclosure
    control) in a count column — ``n``, ``count``, ``frequency``,
    ``missing``, a column starting with ``n_`` or ending in ``_count`` —
    or inside a packed cell of counts (``"1:138; 2:160; 3:2"``, the
    ``levels`` of a descriptives table) of a table (blocks). Zero is not a
    small cell. A diagnostics table (the data checks' findings: columns ``check``,
    ``severity``, ``count`` and ``message``) counts problem records, not people
    in a cell of a cross-tabulation, so its counts are not cells (``note``);
    it is still searched for identifier values, identifier columns and ids.

References
----------
Hundepool, A., Domingo-Ferrer, J., Franconi, L., Giessing, S., Nordholt, E. S.,
Spicer, K., & de Wolf, P.-P. (2012). Statistical Disclosure Control. Wiley.
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

BLOCK, NOTE = "block", "note"
FINDING_COLUMNS = ["check", "severity", "file", "column", "row", "message"]
TEXT_SUFFIXES = {".csv", ".tsv", ".json", ".ipynb", ".html", ".htm", ".md", ".txt", ".svg", ".yaml", ".yml"}
#: per-person count columns that are not counts of people
NOT_COUNTS = {"n_items", "n_iter", "n_leaves", "n_params", "n_parameters", "n_waves"}
_MIN_SHARED = 3
#: columns that make a table a diagnostics table (the data checks' findings)
DIAGNOSTIC_COLUMNS = frozenset({"check", "severity", "count", "message"})


@dataclass
class DisclosureReport:
    """Findings of the disclosure check and the person-level tables it found."""

    findings: pd.DataFrame
    person_level: list

    @property
    def blocking(self) -> pd.DataFrame:
        """The findings that stop packing."""
        return self.findings[self.findings["severity"] == BLOCK]

    @property
    def ok(self) -> bool:
        return self.blocking.empty


def _finding(check, severity, file, column, row, message) -> dict:
    return {"check": check, "severity": severity, "file": file, "column": column,
            "row": row, "message": message}


def is_count_column(name: str) -> bool:
    """True for columns that hold counts of people (``n``, ``count``, ``frequency``, ``n_*``)."""
    low = str(name).lower()
    if low in NOT_COUNTS:
        return False
    return (low in ("n", "count", "frequency", "freq", "missing", "n_missing") or low.startswith("n_")
            or low.endswith("_count"))


#: a cell holding several "label:count" pairs, e.g. "1:138; 2:160; 3:2"
_PACKED = re.compile(r"^\s*[^:;]{1,60}:\s*\d+\s*(?:[;,|]\s*[^:;]{1,60}:\s*\d+\s*)+$")
_PAIR = re.compile(r"([^:;,|]{1,60}):\s*(\d+)")


def packed_counts(cell) -> list[tuple[str, int]] | None:
    """The ``(label, count)`` pairs of a packed cell such as ``"1:138; 2:160; 3:2"`` (else None)."""
    if not isinstance(cell, str) or not _PACKED.match(cell):
        return None
    return [(m.group(1).strip(), int(m.group(2))) for m in _PAIR.finditer(cell)]


def is_diagnostics_table(table: pd.DataFrame) -> bool:
    """True for a table of check findings (problem counts), whose counts are not cells of people."""
    return DIAGNOSTIC_COLUMNS <= {str(c).lower() for c in table.columns}


def _read_table(path: Path) -> pd.DataFrame | None:
    try:
        return pd.read_csv(path, sep="\t" if path.suffix.lower() == ".tsv" else ",", low_memory=False)
    except (pd.errors.ParserError, pd.errors.EmptyDataError, UnicodeDecodeError, ValueError):
        return None


def _identifier_values(long: pd.DataFrame, names: list[str]) -> list[str]:
    values: set[str] = set()
    for name in names:
        if name not in long.columns:
            continue
        for v in long[name].dropna().tolist():
            text = str(v).strip()
            if len(text) >= 4:
                values.add(text)
    return sorted(values, key=lambda s: (-len(s), s))


def _value_pattern(values: list[str]) -> re.Pattern | None:
    if not values:
        return None
    return re.compile("|".join(re.escape(v) for v in values), re.IGNORECASE)


def _cell_text(series: pd.Series) -> np.ndarray:
    num = pd.to_numeric(series, errors="coerce")
    if num.notna().sum() == series.notna().sum():
        arr = num.to_numpy(dtype=float)
        out = np.char.mod("%.10g", np.nan_to_num(arr, nan=0.0)).astype(object)
        out[np.isnan(arr)] = None
        return out
    return series.astype(object).where(series.notna(), None).map(
        lambda v: None if v is None else str(v).strip()).to_numpy(dtype=object)


def _real_text(long: pd.DataFrame, name: str, var) -> np.ndarray:
    col = long[name]
    if var is not None and var.type == "category":
        return col.astype(object).where(col.notna(), None).map(
            lambda v: None if v is None else (f"{float(v):.10g}" if isinstance(v, (int, float, np.integer, np.floating))
                                              else str(v))).to_numpy(dtype=object)
    return _cell_text(col.astype(object) if var is not None and var.type in ("text", "date") else col)


def _ids_named_in_text(text: str, sid: str, real_ids: set) -> tuple[int, list[str]] | None:
    """The first line that names real person ids after the id column's name (``pid 10186, 10190``)."""
    if not real_ids:
        return None
    pattern = re.compile(rf"\b{re.escape(sid)}s?\b[ \t:=#]*([\w.-]+(?:[ \t]*,[ \t]*[\w.-]+)*)")
    first, found = None, []
    for match in pattern.finditer(text):
        ids = [t.strip() for t in match.group(1).split(",") if t.strip() in real_ids]
        if ids:
            if first is None:
                first = text.count("\n", 0, match.start()) + 1
            found += [i for i in ids if i not in found]
    return (first, found) if found else None


def check_outputs(files: dict, codebook, long: pd.DataFrame, min_cell: int = 5,
                  data_included: bool = True, min_cell_source: str = "min_cell") -> DisclosureReport:
    """Run the disclosure checks over output files.

    Parameters
    ----------
    files : dict
        ``{project-relative path: absolute path}`` of the outputs to check.
    codebook : Codebook
        Says which variables are identifiers and which column is the person id.
    long : DataFrame
        The real panel (``Panel.long``), to look for its ids, identifier
        values and rows.
    min_cell : int
        Smallest count a table may show.
    data_included : bool
        Whether the raw data go into the archive (then person-keyed tables
        are only noted, not withheld).
    min_cell_source : str
        Where ``min_cell`` came from, named in the small-cell findings
        (e.g. ``"report.min_cell in config/config.yaml"``).

    Notes
    -----
    Person-keyed tables under ``results/`` (recorded outputs) are listed in
    ``person_level`` so that pack can withhold them; any other file keyed by
    person ids blocks when the raw data stay out.

    Returns
    -------
    DisclosureReport
    """
    sid = codebook.study.id
    identifiers = list(codebook.identifiers)
    pattern = _value_pattern(_identifier_values(long, identifiers))
    real_ids = {str(v) for v in _cell_text(long[sid]) if v is not None} if sid in long.columns else set()
    data_vars = [v.name for v in codebook.data_variables()
                 if not v.identifier and v.name in long.columns and v.type != "text"]
    unique_rows_cache: dict[tuple, set] = {}
    findings: list[dict] = []
    person_level: list[str] = []
    for rel in sorted(files):
        path = Path(files[rel])
        suffix = path.suffix.lower()
        if suffix not in TEXT_SUFFIXES:
            continue
        try:
            text = path.read_text(encoding="utf-8")
        except (UnicodeDecodeError, OSError):
            continue
        if pattern is not None:
            hit = pattern.search(text)
            if hit:
                line = text.count("\n", 0, hit.start()) + 1
                findings.append(_finding("identifier value", BLOCK, rel, "", line,
                                         f"{rel}, line {line}: holds a value of an identifier variable "
                                         f"({', '.join(identifiers)}); remove it from the output"))
        named = _ids_named_in_text(text, sid, real_ids)
        if named:
            line, ids = named
            findings.append(_finding(
                "person ids", NOTE if data_included else BLOCK, rel, "", line,
                f"{rel}, line {line}: names real person ids in text ({sid} {', '.join(ids[:3])}"
                f"{', ...' if len(ids) > 3 else ''}); "
                + ("the raw data are in the archive, so this adds nothing" if data_included
                   else "leave the ids out of this output")))
        if suffix not in (".csv", ".tsv"):
            continue
        table = _read_table(path)
        if table is None or table.empty and not len(table.columns):
            continue
        for col in table.columns:
            if str(col) in identifiers:
                findings.append(_finding("identifier column", BLOCK, rel, str(col), "",
                                         f"{rel}: column {col!r} is an identifier variable; drop it from the output"))
        id_cols = [c for c in table.columns if str(c) in (sid, "id")]
        for col in id_cols:
            vals = [v for v in _cell_text(table[col]) if v is not None]
            overlap = sum(v in real_ids for v in vals)
            if vals and overlap >= max(1, len(vals) // 2) and overlap >= min(min_cell, len(real_ids)):
                if not data_included and not rel.startswith("results/"):
                    findings.append(_finding(
                        "person ids", BLOCK, rel, str(col), "",
                        f"{rel}: column {col!r} holds {overlap} real person ids; it is person-level data "
                        "outside results/. Remove it from the repository (git rm --cached, list it in "
                        ".gitignore), or register it as raw data, then commit"))
                    break
                person_level.append(rel)
                if data_included:
                    msg = (f"{rel}: column {col!r} holds {overlap} person ids; the raw data are in the "
                           "archive, so this adds nothing")
                else:
                    msg = (f"{rel}: column {col!r} holds {overlap} person ids; the table is person-level "
                           "data and is withheld from the archive (its hash is kept)")
                findings.append(_finding("person ids", NOTE, rel, str(col), "", msg))
                break
        if rel in person_level and not data_included:
            continue  # withheld from the archive: nothing of it is disclosed
        shared = [c for c in table.columns if str(c) in data_vars]
        if len(shared) >= _MIN_SHARED:
            key = tuple(sorted(map(str, shared)))
            if key not in unique_rows_cache:
                real = pd.DataFrame({c: _real_text(long, c, codebook.variables.get(c)) for c in key})
                unique_rows_cache[key] = _unique_keys(real, key)
            uniques, near = unique_rows_cache[key]
            if uniques:
                out = pd.DataFrame({c: _cell_text(_without_codes(table[c], codebook.variables.get(c)))
                                    for c in key})
                exact, close, first = 0, 0, None
                for i, row in enumerate(out.itertuples(index=False, name=None)):
                    if row in uniques:
                        exact += 1
                        first = first if first is not None else i
                    elif near and any(row[:j] + row[j + 1:] in near[j] for j in range(len(key))):
                        close += 1
                        first = first if first is not None else i
                if first is not None:
                    findings.append(_finding(
                        "raw row", NOTE if data_included else BLOCK, rel, ", ".join(key), first + 1,
                        f"{rel}, row {first + 1}: {exact} row(s) repeat and {close} differ in one cell from "
                        f"real data rows that are unique over {', '.join(key)}; "
                        + ("the raw data are in the archive, so this adds nothing" if data_included
                           else "aggregate or drop these rows, or remove the file from the repository")))
        if rel not in person_level and is_diagnostics_table(table):
            findings.append(_finding(
                "small cell", NOTE, rel, "count", "",
                f"{rel}: a diagnostics table (check findings); its counts are numbers of problem "
                "records, not cells of a table of people, and are not held to report.min_cell"))
            continue
        if rel in person_level:
            continue
        for col in table.columns:
            if is_count_column(col):
                num = pd.to_numeric(table[col], errors="coerce").to_numpy(dtype=float)
                whole = num[~np.isnan(num)]
                if whole.size and not np.all(whole == np.round(whole)):
                    continue  # shares or means, not counts
                small = np.flatnonzero((num > 0) & (num < min_cell))
                if small.size:
                    i = int(small[0])
                    findings.append(_finding("small cell", BLOCK, rel, str(col), i + 1,
                                             f"{rel}, row {i + 1}, column {col!r}: count {num[i]:g} is below "
                                             f"{min_cell} ({min_cell_source}; {small.size} such cell(s)); "
                                             "suppress or merge them, then rebuild"))
                continue
            if table[col].dtype == object or pd.api.types.is_string_dtype(table[col].dtype):
                hits = []
                for i, cell in enumerate(table[col].tolist()):
                    pairs = packed_counts(cell)
                    if pairs:
                        hits += [(i, label, n) for label, n in pairs if 0 < n < min_cell]
                if hits:
                    i, label, n = hits[0]
                    findings.append(_finding("small cell", BLOCK, rel, str(col), i + 1,
                                             f"{rel}, row {i + 1}, column {col!r}: packed count {label}:{n} is "
                                             f"below {min_cell} ({min_cell_source}; {len(hits)} such count(s) "
                                             "in packed cells); suppress or merge those categories, then "
                                             "rebuild"))
    frame = pd.DataFrame(findings, columns=FINDING_COLUMNS)
    return DisclosureReport(findings=frame, person_level=sorted(set(person_level)))


def _without_codes(series: pd.Series, var) -> pd.Series:
    """Declared missing codes of ``var`` as missing, so a raw-coded copy compares with the clean data."""
    if var is None or not getattr(var, "missing", None):
        return series
    codes = {str(k) for k in var.missing} | {f"{float(k):.10g}" for k in var.missing
                                             if isinstance(k, (int, float)) and not isinstance(k, bool)}
    text = series.astype(object).map(lambda v: None if v is None or v != v else str(v).strip())
    num = pd.to_numeric(series, errors="coerce")
    as_num = num.map(lambda v: None if v != v else f"{v:.10g}")
    hit = text.isin(codes) | as_num.isin(codes)
    return series.where(~hit.to_numpy(), None)


def _unique_keys(real: pd.DataFrame, key: tuple) -> tuple[set, list]:
    """Real rows unique over ``key`` (with at least three observed cells) and, per left-out column,
    the rows unique over the others (for near-copies; only with four or more columns)."""
    def uniques(frame: pd.DataFrame, min_seen: int) -> set:
        counts = frame.value_counts(dropna=False)
        return {tuple(idx) for idx, cnt in counts.items() if cnt == 1
                and sum(x is not None and x == x for x in idx) >= min_seen}

    exact = uniques(real, _MIN_SHARED)
    near: list = []
    if len(key) >= _MIN_SHARED + 1:
        for j in range(len(key)):
            sub = real.drop(columns=[key[j]])
            near.append(uniques(sub, _MIN_SHARED))
    return exact, near


def check_raw_files(files: dict, codebook, tables: dict) -> list[dict]:
    """Findings for raw data files that would go into the archive with identifier values in them.

    ``tables`` maps the project-relative path to the file's DataFrame as read.
    """
    out = []
    for rel in sorted(files):
        frame = tables.get(rel)
        if frame is None:
            continue
        for name in codebook.identifiers:
            if name in frame.columns and frame[name].notna().any() and (
                    frame[name].astype(str).str.strip() != "").any():
                out.append(_finding("identifier column", BLOCK, rel, name, "",
                                    f"{rel}: raw data column {name!r} is an identifier and holds values; "
                                    "remove the column before packing with --raw include, or pack with "
                                    "--raw exclude or --raw stand-in"))
    return out
