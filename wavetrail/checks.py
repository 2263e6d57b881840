"""The check suite: raw panel data against its codebook.

:func:`run_checks` returns the findings table (variable, wave, check,
severity, count, rows, message); :func:`describe` and :func:`attrition`
give the descriptives and attrition tables. Severities: ``error`` stops the
build, ``warning`` asks for a look, ``info`` reports what was done.

Checks (the ``check`` column):

=========================  ========  =============================================
check                      severity  what it finds
=========================  ========  =============================================
unknown_column             warning   a file column the codebook does not list
missing_column             error     a codebook variable a file lacks at a wave
type_mismatch              error     a value that is not of the declared type
out_of_range               error     a number outside the declared range
unknown_level              error     a category code not among the levels
suspected_missing_code     error     -9, 99, 999, ... outside the range and not
                                     declared under ``missing`` (warning when the
                                     variable has no range)
missing_code               info      declared missing codes turned into NaN
unexpected_wave            warning   values at a wave the variable is not listed for
                                     (info when they repeat the first-wave value)
measured_once              info      a wide-file column without a wave suffix, read
                                     as measured once at the first wave
transform_domain           error     a derived variable's source outside the
                                     transform's domain (log of x <= 0, ...)
derived_in_file            error     a file column named like a derived variable
missing_id                 error     a record without a person id
unknown_wave               error     a wave value not in ``study.waves``
duplicate_id               error     the same (id, wave) more than once
late_entry                 warning   ids first seen after the first wave
wave_coverage              info      people per wave (warning for an empty wave)
attrition                  info      share of first-wave people still present
straight_lining            warning   the same answer to every item of a scale
identifier                 info      a direct identifier: never written out
=========================  ========  =============================================
"""

from __future__ import annotations


import numpy as np
import pandas as pd

from wavetrail.codebook import Codebook, Variable, load_codebook
from wavetrail.panel import (FILE, ROW, WAVE_RAW, Panel, _categorical, _small_int_lookup, clean_values, code_positions,
                             derive_values, load_panel, match_missing, text_column, wave_positions)

__all__ = ["run_checks", "describe", "attrition", "FINDING_COLUMNS", "SEVERITIES", "has_errors",
           "looks_like_missing_code"]

FINDING_COLUMNS = ["variable", "wave", "check", "severity", "count", "rows", "message"]
SEVERITIES = ("error", "warning", "info")
#: example rows given per finding
MAX_ROWS = 5
#: least number of items for the straight-lining check (common practice: not for 2-item scales)
MIN_STRAIGHT_ITEMS = 3


def looks_like_missing_code(values) -> np.ndarray:
    """True for numbers written the way missing codes are (common practice, no source).

    Negative numbers -1 ... -9 and repeated digits of 7, 8 or 9 (77, 88, 99,
    97, 98, 777, 999, 9999, ... with either sign).
    """
    v = np.asarray(values, dtype=float)
    out = np.zeros(v.shape, dtype=bool)
    ok = np.isfinite(v) & (v == np.round(v))
    with np.errstate(invalid="ignore"):  # numbers beyond int64 wrap as before and match nothing
        a = np.abs(np.where(ok, v, 0)).astype(np.int64)
    out |= ok & (v < 0) & (a >= 1) & (a <= 9)
    big = ok & (a >= _CODE_LIKE[0])  # the 2-digit rule starts at 77; most answers are far below
    if big.any():
        out[big] |= np.isin(a[big], _CODE_LIKE)
    return out


def _code_like_numbers() -> np.ndarray:
    """Every int64 of two or more digits, all 7, all 8, all 9, or 9s ending in 7 or 8 (sorted)."""
    found = set()
    for n in range(2, 20):
        for text in ("7" * n, "8" * n, "9" * n, "9" * (n - 1) + "7", "9" * (n - 1) + "8"):
            if int(text) <= np.iinfo(np.int64).max:
                found.add(int(text))
    return np.asarray(sorted(found), dtype=np.int64)


_CODE_LIKE = _code_like_numbers()


def has_errors(findings: pd.DataFrame) -> bool:
    """True when any finding has severity ``error``."""
    return bool(len(findings)) and bool((findings["severity"] == "error").any())


class _Collector:
    def __init__(self):
        self.rows: list[dict] = []

    def add(self, check, severity, message, variable="", wave=None, count=1, rows=""):
        self.rows.append({"variable": variable, "wave": wave, "check": check, "severity": severity,
                          "count": int(count), "rows": rows, "message": message})

    def frame(self) -> pd.DataFrame:
        df = pd.DataFrame(self.rows, columns=FINDING_COLUMNS)
        df["wave"] = pd.Series([None if w is None or (isinstance(w, float) and np.isnan(w)) else w
                                for w in df["wave"]], dtype=object)
        if not len(df):
            return df.astype({"count": "int64"})
        rank = df["severity"].map({s: i for i, s in enumerate(SEVERITIES)})
        wave_sort = df["wave"].map(lambda w: "" if w is None or (isinstance(w, float) and np.isnan(w))
                                   else str(w).zfill(8))
        order = pd.DataFrame({"r": rank, "c": df["check"], "v": df["variable"].astype(str),
                              "w": wave_sort, "m": df["message"]})
        idx = order.sort_values(["r", "c", "v", "w", "m"], kind="mergesort").index
        return df.loc[idx].reset_index(drop=True)


def _where(rec: pd.DataFrame, mask) -> str:
    """Up to MAX_ROWS ``file:row`` of the records in ``mask`` (a boolean mask, or sorted positions)."""
    mask = np.asarray(mask)
    idx = (np.flatnonzero(mask) if mask.dtype == bool else mask)[:MAX_ROWS]
    files, rows = rec[FILE].iloc[idx].tolist(), rec[ROW].iloc[idx].tolist()
    return "; ".join(f"{f}:{int(r)}" for f, r in zip(files, rows))


def _examples(values, n=3) -> str:
    """The first ``n`` distinct values, as shown in messages (a long Series: its head first)."""
    if isinstance(values, pd.Series) and len(values) > 256:
        head = _distinct_shown(values.iloc[:256], n)  # most columns show n distinct values early on
        if len(head) == n:
            return ", ".join(head)
    return ", ".join(_distinct_shown(values, n))


def _distinct_shown(values, n) -> list:
    seen = []
    for v in values:
        t = _show(v)
        if t not in seen:
            seen.append(t)
        if len(seen) == n:
            break
    return seen


def _show(v) -> str:
    if isinstance(v, (float, np.floating)) and float(v).is_integer():
        return str(int(v))
    return repr(v) if isinstance(v, str) else str(v)


def run_checks(panel_or_paths, codebook: Codebook | str | None = None) -> pd.DataFrame:
    """Check panel data against the codebook.

    Parameters
    ----------
    panel_or_paths : Panel, or path(s) / DataFrame(s) for :func:`load_panel`
    codebook : Codebook or path, optional
        Needed when ``panel_or_paths`` is not a Panel.

    Returns
    -------
    DataFrame
        Findings: variable, wave, check, severity, count (values, records or
        people the finding is about), rows (up to five ``file:row`` examples,
        the row numbers of the raw file: a CSV's line, header = line 1), message; sorted
        errors first. Person ids are never quoted (the ``rows`` locate the
        records), nor values of identifier variables.
    """
    if isinstance(panel_or_paths, Panel):
        panel = panel_or_paths
    else:
        if codebook is None:
            raise TypeError("run_checks needs a codebook when given data files")
        if not isinstance(codebook, Codebook):
            codebook = load_codebook(codebook)
        panel = load_panel(panel_or_paths, codebook)
    cb = panel.codebook
    out = _Collector()
    rec = panel.records.reset_index(drop=True)
    waves = list(cb.study.waves)
    pos = wave_positions(rec[WAVE_RAW], waves)
    place = {w: i for i, w in enumerate(waves)}
    # the place of each record's codebook wave (its last place; -1: a wave not in study.waves),
    # computed once for every check; the wave itself is waves[__order] (see _record_waves)
    if [place[w] for w in waves] == list(range(len(waves))):  # distinct waves: the place is the order
        order = pos
    else:
        order = np.asarray([place[w] for w in waves] + [-1], dtype=np.int64)[pos]
    del pos
    rec = rec.assign(__order=order)

    _structure(panel, out)
    _ids_and_waves(panel, rec, out)
    for var in cb.file_variables():
        if var.name in rec.columns and var.name != panel.wave:
            _values(var, rec, out, cb)
    for var in cb.data_variables():
        if var.derived and var.derived_from in rec.columns:
            _derived(var, rec, out, cb)
    _coverage(panel, out)
    _straight_lining(panel, out)
    for name in cb.identifiers:
        out.add("identifier", "info", f"{name} is marked identifier: it is read for the checks "
                "but never written to an output or an archive", variable=name)
    return out.frame()


def _structure(panel: Panel, out: _Collector) -> None:
    import difflib

    cb = panel.codebook
    known = list(cb.variables)
    for src in panel.sources:
        single = src.waves[0] if len(src.waves) == 1 else None
        for name in src.once:
            first = cb.study.waves[0]
            out.add("measured_once", "info",
                    f"column {name!r} in {src.name} has no wave suffix: read as measured once, at wave {first} "
                    f"(to say so, add `waves: [{first}]` to its entry, codebook {cb.where(name)})",
                    variable=name, wave=first, count=int(src.table.frame[name].notna().sum()), rows=src.name)
        for col in src.unknown:
            if col in cb.study.left_out:  # declared as not a variable (a row index)
                continue
            if col in cb.variables and cb.variables[col].derived:
                var = cb.variables[col]
                out.add("derived_in_file", "error",
                        f"column {col!r} in {src.name} has the name of a derived variable, which the codebook "
                        f"computes from {var.derived_from} ({cb.where(col)}); rename the column or the derived "
                        "variable", variable=col, wave=single, rows=src.name)
                continue
            close = difflib.get_close_matches(col, known, n=1)
            hint = f"; renamed {close[0]}?" if close else ""
            out.add("unknown_column", "warning",
                    f"column {col!r} in {src.name} is not in the codebook{hint} "
                    "(add it to the codebook or drop it)", variable=col, wave=single,
                    count=int(src.table.frame[col].notna().sum()) if col in src.table.frame else 1,
                    rows=src.name)
        by_var: dict[str, list] = {}
        for name, w in src.absent:
            by_var.setdefault(name, []).append(w)
        for name, ws in by_var.items():
            measured = [w for w in src.waves if cb.variables[name].measured_at(w)]
            if src.layout == "wide" or len(ws) < len(measured) or len(src.waves) == 1:
                for w in ws:
                    col = cb.study.wide_column(name, w) if src.layout == "wide" else name
                    out.add("missing_column", "error",
                            f"{src.name} has no column {col!r} for wave {w} (codebook {cb.where(name)})",
                            variable=name, wave=w, rows=src.name)
            else:
                out.add("missing_column", "error",
                        f"{src.name} has no column {name!r} (codebook {cb.where(name)})",
                        variable=name, rows=src.name)


def _record_waves(rec: pd.DataFrame, cb: Codebook) -> pd.Series:
    """The codebook wave of each record (None: a wave not in ``study.waves``), as objects."""
    waves = list(cb.study.waves)
    wave_values = np.empty(len(waves) + 1, dtype=object)
    wave_values[:-1] = waves
    wave_values[-1] = None
    return pd.Series(wave_values[rec["__order"].to_numpy()], index=rec.index, dtype=object)


def _ids_and_waves(panel: Panel, rec: pd.DataFrame, out: _Collector) -> None:
    sid, cb = panel.id, panel.codebook
    no_id = rec[sid].isna().to_numpy()
    if no_id.any():
        out.add("missing_id", "error", f"{int(no_id.sum())} record(s) have no {sid}",
                variable=sid, count=int(no_id.sum()), rows=_where(rec, no_id))
    bad_wave = (rec["__order"].to_numpy() < 0) & ~no_id  # no codebook wave (faster than isna of the wave objects)
    if bad_wave.any():
        vals = _examples(rec.loc[bad_wave, WAVE_RAW])
        out.add("unknown_wave", "error",
                f"{int(bad_wave.sum())} record(s) have a wave not in study.waves {list(cb.study.waves)} "
                f"(e.g. {vals})", variable=panel.wave, count=int(bad_wave.sum()), rows=_where(rec, bad_wave))
    ok = ~no_id & ~bad_wave
    # only the columns used below; every record when all have an id and a known wave (no copy)
    sub = rec if ok.all() else rec.loc[ok, [sid, "__order", FILE, ROW]]
    sub_order = sub["__order"].to_numpy()
    place = {w: i for i, w in enumerate(cb.study.waves)}
    # (id as text, wave): ids are all numbers or all text here, so the id itself compares the same
    starts = _run_starts(sub[sid].to_numpy(), sub_order)
    repeats = len(panel.long) != len(sub)
    # one integer per person: not needed for sorted records without a repeated pair
    person, n_people = _person_codes(sub[sid].to_numpy()) if starts is None or repeats else (None, len(starts))
    # the long table holds one row per distinct (id, wave) pair of these records: as many rows as
    # records means no pair repeats (no hashing of the pairs needed)
    if repeats:
        keys = pd.Series(person.astype(np.int64) * (len(cb.study.waves) + 1) + sub_order)
        dup_all = keys.duplicated(keep=False).to_numpy()
        if dup_all.any():
            extra = keys.duplicated(keep="first").to_numpy()
            for w in cb.study.waves:
                in_w = sub_order == place[w]
                n = int((extra & in_w).sum())
                if n:
                    out.add("duplicate_id", "error",
                            f"{n} extra record(s) repeat an ({sid}, wave) pair at wave {w} (file rows in "
                            "`rows`); only the first is used", variable=sid, wave=w, count=n,
                            rows=_where(sub, dup_all & in_w))
        del keys, dup_all
    first_wave = cb.study.waves[0]
    if starts is not None:
        # sorted number ids, each (id, wave) once in wave order: a person's first record is their
        # earliest wave, and the only record of theirs at that wave
        first_seen = sub_order[starts].astype(np.int64)
    else:
        # each person's first wave place: filled from the last place down, so the earliest wins
        first_seen = np.full(n_people, len(cb.study.waves), dtype=np.int64)
        for k in sorted(set(place.values()), reverse=True):
            first_seen[person[sub_order == k]] = k
    late = np.unique(first_seen[first_seen > 0])
    for o in late.tolist():
        w = cb.study.waves[int(o)]
        who = first_seen == o
        mask = starts[who] if starts is not None else who[person] & (sub_order == o)
        out.add("late_entry", "warning",
                f"{int(who.sum())} id(s) first appear at wave {w}, not at wave {first_wave} "
                "(file rows in `rows`)", variable=sid, wave=w, count=int(who.sum()),
                rows=_where(sub, mask))


def _run_starts(ids: np.ndarray, order: np.ndarray) -> np.ndarray | None:
    """Where each person's records start, when number ids come sorted with each (id, wave) once in
    wave order (the people in order of first appearance); None otherwise."""
    if ids.dtype.kind not in "iu" or len(ids) < 2:
        return None
    step = ids[1:] != ids[:-1]
    if not (bool(np.all(ids[1:] >= ids[:-1])) and bool(np.all(step | (order[1:] > order[:-1])))):
        return None
    starts = np.empty(int(np.count_nonzero(step)) + 1, dtype=np.int64)
    starts[0] = 0
    starts[1:] = np.flatnonzero(step) + 1
    return starts


def _whole_numbers(num: np.ndarray, block: int = 1 << 16) -> bool:
    """True when every finite value of ``num`` is a whole number (looked at in blocks: no
    full-length temporaries)."""
    for start in range(0, len(num), block):
        x = num[start:start + block]
        with np.errstate(invalid="ignore"):
            if np.any(np.isfinite(x) & (x != np.round(x))):
                return False
    return True


def _values(var: Variable, rec: pd.DataFrame, out: _Collector, cb: Codebook) -> None:
    raw = rec[var.name]
    order = rec["__order"].to_numpy()
    waves = list(cb.study.waves)
    place = {w: i for i, w in enumerate(waves)}  # a repeated wave: its last place
    values = raw.to_numpy()
    numeric = values.dtype.kind in "iuf"
    empty = np.isnan(values) if values.dtype.kind == "f" else (
        np.zeros(len(values), dtype=bool) if numeric else raw.isna().to_numpy())
    found = code_positions(raw, var)  # (positions, code place) of the cells holding a declared code
    if found is None:  # a column mixing kinds of values: value by value
        hits = match_missing(raw, var)
        at_code = np.flatnonzero(hits.notna().to_numpy())
    else:
        at_code, code_kind = found
    filled = ~empty
    filled[at_code] = False
    del empty

    def by_wave(at):
        """The positions ``at`` (sorted) split by codebook wave, in the order findings are listed."""
        o = order[at]
        for w in waves + [None]:
            sel = at[o < 0] if w is None else at[o == place[w]]
            if len(sel):
                yield w, sel

    def emit(check, severity, at, message):
        """One finding per wave for the records at positions ``at`` (sorted)."""
        for w, sel in by_wave(at):
            n = len(sel)
            vals = "values withheld: identifier" if var.identifier else _examples(raw.iloc[sel])
            out.add(check, severity, message(n, vals), variable=var.name, wave=w, count=n,
                    rows=_where(rec, sel))

    if len(at_code):
        for w, sel in by_wave(at_code):
            if w is None:
                continue
            if found is not None:  # the codes met, in order of first appearance (as value_counts)
                ks, first_at, n_k = np.unique(code_kind[np.searchsorted(at_code, sel)], return_index=True, return_counts=True)
                keys = list(var.missing)
                pairs = [(keys[k], n) for _, k, n in sorted(zip(first_at.tolist(), ks.tolist(),
                                                                n_k.tolist()))]
            else:
                pairs = list(hits.iloc[sel].value_counts(sort=False).items())
            parts = [f"{_show(c)} {var.missing[c]} ({int(n)})" for c, n in pairs]
            out.add("missing_code", "info", f"{len(sel)} value(s) set to missing: " + ", ".join(parts),
                    variable=var.name, wave=w, count=len(sel), rows=_where(rec, sel))
    del at_code, found

    if var.waves is not None:
        # the codebook wave of a record is waves[order] (order < 0: none); listed = among var.waves
        listed = np.append(pd.Series(np.asarray(waves + [None], dtype=object)[:-1], dtype=object)
                           .isin(list(var.waves)).to_numpy(), True)
        off = filled & ~listed[order]
        if off.any():
            _unexpected_waves(var, rec, off, out, cb)

    if var.type in ("integer", "number"):
        num = values.astype(float, copy=False) if numeric else pd.to_numeric(raw, errors="coerce").to_numpy(dtype=float)
        # a number column read as numbers: every filled cell is a number (filled excludes NaN)
        bad = np.zeros(len(num), dtype=bool) if numeric else filled & np.isnan(num)
        if var.type == "integer" and not (numeric and _whole_numbers(num)):
            bad = bad | (filled & np.isfinite(num) & (num != np.round(num)))
        emit("type_mismatch", "error", np.flatnonzero(bad),
             lambda n, v: f"{n} value(s) are not {'whole numbers' if var.type == 'integer' else 'numbers'} "
                          f"(e.g. {v})")
        del bad
        if var.range is not None:
            lo, hi = var.range
            with np.errstate(invalid="ignore"):
                at = np.flatnonzero(filled & ((num < lo) | (num > hi)))  # outside the range (NaN never is)
            x = num[at]
            at = at[np.isfinite(x)]
            x = num[at]
            codelike = looks_like_missing_code(x)
            if hi < 9:  # a lone 9 on a short item is a classic "no answer" code
                codelike = codelike | (x == 9)
            emit("suspected_missing_code", "error", at[codelike],
                 lambda n, v: f"{n} value(s) look like missing codes not declared under `missing` "
                              f"(e.g. {v} on a {lo}-{hi} item); declare them or correct the data")
            emit("out_of_range", "error", at[~codelike],
                 lambda n, v: f"{n} value(s) outside the range [{lo}, {hi}] (e.g. {v})")
        else:
            ok = filled & np.isfinite(num)
            at = np.flatnonzero(ok & (num < 0))
            codelike = looks_like_missing_code(num[at])
            if codelike.any() and (ok & (num >= 0)).any() and codelike.all():
                emit("suspected_missing_code", "warning", at,
                     lambda n, v: f"{n} negative value(s) that look like missing codes (e.g. {v}) among "
                                  "otherwise non-negative values; declare them under `missing` or give a range")
    elif var.type == "category":
        codes = list(var.levels)
        # the level of each cell, worked out once per distinct value (code -1: no level)
        at = np.flatnonzero(filled & (_categorical(raw, codes, False).codes < 0))
        num = pd.to_numeric(raw.iloc[at], errors="coerce").to_numpy(dtype=float)
        codelike = looks_like_missing_code(num)
        emit("suspected_missing_code", "error", at[codelike],
             lambda n, v: f"{n} value(s) look like missing codes not declared under `missing` (e.g. {v}); "
                          "declare them or correct the data")
        emit("unknown_level", "error", at[~codelike],
             lambda n, v: f"{n} value(s) are not among the levels {', '.join(map(_show, codes))} (e.g. {v})")
    elif var.type == "date":
        text = pd.Series(text_column(raw), index=raw.index, dtype=object)
        parsed = pd.to_datetime(text, errors="coerce", format="ISO8601")
        bad = filled & parsed.isna().to_numpy()
        emit("type_mismatch", "error", np.flatnonzero(bad),
             lambda n, v: f"{n} value(s) are not dates (YYYY-MM-DD) (e.g. {v})")


def _unexpected_waves(var: Variable, rec: pd.DataFrame, off: np.ndarray, out: _Collector, cb: Codebook) -> None:
    """Values at waves a variable is not listed for: one finding, not one per wave.

    A long file often repeats a time-invariant value (sex, birth year) on every
    row of a person; values equal to the person's value at a listed wave are
    reported once as info, values that differ once as a warning.
    """
    sid = cb.study.id
    values, _ = clean_values(rec[var.name].reset_index(drop=True), var)
    values = pd.Series(np.asarray(values, dtype=object))
    wave = _record_waves(rec, cb)
    listed = ~off & wave.isin(list(var.waves)).to_numpy() & values.notna().to_numpy()
    ref = pd.Series(values[listed].to_numpy(), index=rec.loc[listed, sid].astype(str).to_numpy())
    ref = ref[~ref.index.duplicated(keep="first")]
    mine = pd.Series(rec[sid].astype(str).to_numpy()).map(ref)
    # cleaned values of one variable have one type, so equal values have equal text
    same = off & mine.notna().to_numpy() & values.notna().to_numpy() \
        & (values.astype(str).to_numpy() == mine.astype(str).to_numpy())
    differ = off & ~same
    listed_text = ", ".join(map(str, var.waves))
    later = sorted({str(w) for w in wave[off]})

    def one_wave(mask):
        ws = list(dict.fromkeys(wave[mask]))
        return ws[0] if len(ws) == 1 else None

    if same.any():
        out.add("unexpected_wave", "info",
                f"{int(same.sum())} value(s) at wave(s) {', '.join(later)} repeat the value at wave {listed_text}; "
                f"{var.name} is used as measured at wave {listed_text} only", variable=var.name,
                wave=one_wave(same), count=int(same.sum()), rows=_where(rec, same))
    if differ.any():
        vals = "values withheld: identifier" if var.identifier else _examples(rec.loc[differ, var.name])
        out.add("unexpected_wave", "warning",
                f"{int(differ.sum())} value(s) at wave(s) the codebook does not list for {var.name} (waves "
                f"{list(var.waves)}) differ from the value at a listed wave (e.g. {vals}); they are not used — "
                f"if {var.name} changes over time, remove `waves:` from its entry ({cb.where(var.name)})",
                variable=var.name, wave=one_wave(differ), count=int(differ.sum()), rows=_where(rec, differ))


def _derived(var: Variable, rec: pd.DataFrame, out: _Collector, cb: Codebook) -> None:
    """A derived variable: its source values outside the transform's domain, its range."""
    src = cb.variables[var.derived_from]
    cleaned, _ = clean_values(rec[src.name].reset_index(drop=True), src)
    wave = _record_waves(rec, cb)
    values, invalid = derive_values(cleaned, wave.to_numpy(), var.transform)
    need = {"log": "above 0", "log1p": "above -1", "sqrt": "0 or above"}.get(var.transform, "")
    fix = {"log": "use `transform: log1p` if zeros are valid values, declare a code such as 0 under `missing` "
                  f"of {src.name} if it means 'no value', or correct the data",
           "log1p": "declare such codes under `missing`, or correct the data",
           "sqrt": "declare negative codes under `missing`, or correct the data"}.get(var.transform, "")
    for w in list(cb.study.waves) + [None]:
        in_w = wave.isna().to_numpy() if w is None else (wave == w).to_numpy()
        m = invalid & in_w
        if m.any():
            out.add("transform_domain", "error",
                    f"{int(m.sum())} value(s) of {src.name} are not {need}, so `transform: {var.transform}` of "
                    f"{var.name} cannot be applied (e.g. {_examples(cleaned[m])}); {fix}",
                    variable=var.name, wave=w, count=int(m.sum()), rows=_where(rec, m))
    if var.range is not None:
        lo, hi = var.range
        outside = np.isfinite(values) & ((values < lo) | (values > hi))
        for w in cb.study.waves:
            m = outside & (wave == w).to_numpy()
            if m.any():
                out.add("out_of_range", "error",
                        f"{int(m.sum())} derived value(s) outside the range [{lo}, {hi}] "
                        f"(e.g. {_examples(np.round(values[m], 4))})",
                        variable=var.name, wave=w, count=int(m.sum()), rows=_where(rec, m))


def _coverage(panel: Panel, out: _Collector) -> None:
    table = attrition(panel)
    for row in table.itertuples(index=False):
        if row.n_present == 0:
            out.add("wave_coverage", "warning", f"no one has a record at wave {row.wave}",
                    variable=panel.wave, wave=row.wave, count=0)
        else:
            out.add("wave_coverage", "info", f"{row.n_present} people at wave {row.wave}",
                    variable=panel.wave, wave=row.wave, count=int(row.n_present))
    first = panel.waves[0]
    n_first = int(table["n_present"].iloc[0])
    for row in table.itertuples(index=False):
        if row.wave == first or n_first == 0:
            continue
        out.add("attrition", "info",
                f"{row.n_retained} of {n_first} wave-{first} people present at wave "
                f"{row.wave} (retention {row.retention:.1%})", variable=panel.wave, wave=row.wave,
                count=n_first - int(row.n_retained))


def _straight_lining(panel: Panel, out: _Collector) -> None:
    long = panel.long
    for name, scale in panel.codebook.scales.items():
        if len(scale.items) < MIN_STRAIGHT_ITEMS:
            continue
        # column by column (no 2-D copy of the items): every item answered and all answers equal
        # (the first answer finite and every other equal to it)
        cols = [long[item].to_numpy(dtype=float) for item in scale.items]
        same = np.isfinite(cols[0])
        for c in cols[1:]:
            same &= c == cols[0]
        at = np.flatnonzero(same)  # the few straight-lined rows, split by wave below
        del same
        wave_at = long[panel.wave].iloc[at].reset_index(drop=True)
        for w in panel.waves:
            sel = at[(wave_at == w).to_numpy()]
            n = len(sel)
            if n:
                out.add("straight_lining", "warning",
                        f"{n} people gave the same answer to all {len(scale.items)} items of {name} "
                        "(file rows in `rows`)", variable=name, wave=w, count=n,
                        rows=_where(panel.origin, sel))


# --------------------------------------------------------------------------- tables


def _person_codes(ids: np.ndarray) -> tuple[np.ndarray, int]:
    """One integer per person (in order of first appearance) and the number of people.

    Sorted number ids (the long table's order) are numbered by runs, without hashing.
    """
    if ids.dtype.kind in "iu" and len(ids) > 1 and bool(np.all(ids[1:] >= ids[:-1])):
        person = np.empty(len(ids), dtype=np.int32 if len(ids) < 2**31 else np.intp)
        person[0] = 0
        np.cumsum(ids[1:] != ids[:-1], out=person[1:])
        return person, int(person[-1]) + 1
    person, people = pd.factorize(ids, use_na_sentinel=False)
    return person, len(people)


def attrition(panel: Panel) -> pd.DataFrame:
    """People per wave.

    Returns
    -------
    DataFrame
        wave, n_present, n_missing (seen at some wave but not this one),
        n_retained (first-wave people present), retention (n_retained over
        the first-wave count), n_new (first seen at this wave), n_dropped
        (present at the previous wave, absent now).
    """
    long = panel.long
    # people as integer codes, presence as one boolean vector per wave (set algebra on arrays)
    person, n_all = _person_codes(long[panel.id].to_numpy())
    wave_col = long[panel.wave].to_numpy()
    present = {}
    place = {}
    for k, w in enumerate(panel.waves):
        place.setdefault(w, k)
    at = _small_int_lookup(wave_col, lambda v: place.get(v, -1), np.int64) if len(place) == len(panel.waves) \
        and all(type(w) is int for w in panel.waves) else None
    if at is not None:  # integer waves: each row's wave place by one look-up, presence by one scatter
        has_all = np.zeros((len(panel.waves) + 1, n_all), dtype=bool)  # (the last row: no listed wave)
        has_all[at, person] = True
        del at
        for k, w in enumerate(panel.waves):
            present[w] = has_all[k]
    for w in panel.waves:
        if w in present:
            continue
        has = np.zeros(n_all, dtype=bool)
        has[person[wave_col == w]] = True
        present[w] = has
    first = present[panel.waves[0]]
    n_first = int(first.sum())
    seen = np.zeros(n_all, dtype=bool)
    rows = []
    prev = None
    for w in panel.waves:
        ids = present[w]
        n_ret = int((ids & first).sum())
        rows.append({"wave": w, "n_present": int(ids.sum()), "n_missing": int((~ids).sum()),
                     "n_retained": n_ret,
                     "retention": (n_ret / n_first) if n_first else float("nan"),
                     "n_new": int((ids & ~seen).sum()),
                     "n_dropped": int((prev & ~ids).sum()) if prev is not None else 0})
        seen |= ids
        prev = ids
    return pd.DataFrame(rows)


def describe(panel: Panel) -> pd.DataFrame:
    """Descriptives per variable and wave (identifier and text columns left out).

    Returns
    -------
    DataFrame
        variable, wave, n, missing, mean, sd, min, max, levels (``code:count``
        for categories).
    """
    long = panel.long
    rows = []
    # each wave's rows (in table order, so every sum runs as over a boolean selection), found once
    wave_col = long[panel.wave].to_numpy()
    in_wave: dict = {}
    for var in panel.codebook.data_variables():
        if var.identifier or var.type in ("text",) or var.name not in long.columns:
            continue
        column = long[var.name]
        numbers = codes = None
        if var.type in ("integer", "number") and column.dtype.kind in "iuf":
            numbers = column.to_numpy(dtype=float)
        elif var.type == "category" and isinstance(column.dtype, pd.CategoricalDtype):
            codes = column.array.codes
        for w in panel.waves:
            if not var.measured_at(w):
                continue
            if w not in in_wave:
                in_wave[w] = np.flatnonzero(wave_col == w)
            part = in_wave[w]
            row = {"variable": var.name, "wave": w, "n": 0, "missing": 0, "mean": np.nan, "sd": np.nan,
                   "min": np.nan, "max": np.nan, "levels": ""}
            if numbers is not None:
                x = numbers[part]  # missing = NaN
                row.update(n=int(np.count_nonzero(~np.isnan(x))), missing=int(np.count_nonzero(np.isnan(x))))
                x = x[np.isfinite(x)]
                if len(x):
                    row.update(mean=float(x.mean()), min=float(x.min()), max=float(x.max()),
                               sd=float(x.std(ddof=1)) if len(x) > 1 else np.nan)
            elif codes is not None:
                # level counts from the codes, every level in level order (as value_counts(sort=False))
                c = codes[part]
                counts = np.bincount(c[c >= 0], minlength=len(column.cat.categories))
                row.update(n=int(np.count_nonzero(c >= 0)), missing=int(np.count_nonzero(c < 0)))
                row["levels"] = "; ".join(f"{_show(k)}:{int(v)}"
                                          for k, v in zip(column.cat.categories.tolist(), counts.tolist()))
            else:
                col = column.iloc[part]
                row.update(n=int(col.notna().sum()), missing=int(col.isna().sum()))
                if var.type in ("integer", "number"):
                    x = col.to_numpy(dtype=float)
                    x = x[np.isfinite(x)]
                    if len(x):
                        row.update(mean=float(x.mean()), min=float(x.min()), max=float(x.max()),
                                   sd=float(x.std(ddof=1)) if len(x) > 1 else np.nan)
                elif var.type == "category":
                    counts = col.value_counts(sort=False)
                    row["levels"] = "; ".join(f"{_show(k)}:{int(v)}" for k, v in counts.items())
            rows.append(row)
    return pd.DataFrame(rows, columns=["variable", "wave", "n", "missing", "mean", "sd", "min", "max", "levels"])
