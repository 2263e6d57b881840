"""Column-at-a-time reading and checking give exactly what the value-by-value code gave.

The reference functions below are the value-by-value definitions (one Python
call per cell); the library now calls them once per distinct value of a column.
"""

import numpy as np
import pandas as pd
import pytest

import wavetrail.readers as readers
from wavetrail.checks import looks_like_missing_code
from wavetrail.codebook import Variable
from wavetrail.panel import (clean_values, level_column, level_of, map_column, match_missing, text_column,
                             wave_key, wave_keys, wave_positions)


def ref_match_missing(raw, var):
    out = pd.Series([None] * len(raw), index=raw.index, dtype=object)
    if not var.missing:
        return out
    num = pd.to_numeric(raw, errors="coerce")
    text = raw.map(lambda v: None if v is None or (isinstance(v, float) and np.isnan(v)) else str(v).strip())
    for code in var.missing:
        if isinstance(code, (int, float)) and not isinstance(code, bool):
            hit = (num == float(code)).to_numpy()
        else:
            hit = (text == str(code)).to_numpy()
        out[hit & out.isna().to_numpy()] = code
    return out


def ref_looks_like_missing_code(values):
    v = np.asarray(values, dtype=float)
    out = np.zeros(v.shape, dtype=bool)
    ok = np.isfinite(v) & (v == np.round(v))
    a = np.abs(np.where(ok, v, 0)).astype(np.int64)
    for i in np.flatnonzero(ok):
        s = str(a[i])
        if v[i] < 0 and 1 <= a[i] <= 9:
            out[i] = True
        elif len(s) >= 2 and (set(s) <= {"9"} or set(s) <= {"8"} or set(s) <= {"7"}
                              or (set(s[:-1]) <= {"9"} and s[-1] in "78")):
            out[i] = True
    return out


TEXT = ["-99", "-99.0", " -99 ", "-98", "99", "1", "1.0", " 2", "2.5", "girl", "boy", "", "NA", "x",
        "3", "-9", "1e2", "-0", "0.0"]
NUMBERS = [-99.0, -98.0, 1.0, 2.0, 2.5, 99.0, -0.0, 0.0, np.nan, 1e2, -9.0, 3.0, 9999.0]


def columns():
    rng = np.random.default_rng(3)
    text = rng.choice(TEXT, 400).astype(object)
    text[rng.random(400) < 0.1] = None
    text_nan = text.copy()
    text_nan[rng.random(400) < 0.1] = np.nan  # None and NaN both stand for an empty cell
    mixed = np.asarray([1, "1", 2.0, "-99", -99, None, True, "a", 1.0, np.nan] * 8, dtype=object)
    return {
        "text": pd.Series(text, dtype=object),
        "text_nan": pd.Series(text_nan, dtype=object),
        "float": pd.Series(rng.choice(NUMBERS, 400)),
        "int": pd.Series(rng.choice([-99, -98, 1, 2, 3, 99, 7, -9], 400)),
        "int_wide": pd.Series(rng.choice([-(2 ** 40), 1, 2, 2 ** 40, -99], 400)),
        "whole_float": pd.Series(rng.choice([1.0, 2.0, np.nan, -99.0, 0.0, 3.0, 99.0], 400)),
        "whole_float_negzero": pd.Series(rng.choice([1.0, -0.0, np.nan, -99.0, 0.0], 400)),
        "mixed": pd.Series(mixed, dtype=object),
        "empty": pd.Series([None] * 5, dtype=object),
        "str_dtype": pd.Series(["1", "2", None, "-99"] * 10, dtype="str"),
    }


VARIABLES = [
    Variable(name="a", type="integer", range=(1, 5), missing={-99: "refused", -98: "do not know"}),
    Variable(name="b", type="integer", missing={"-99": "text code", 99: "number code"}),
    Variable(name="c", type="number", missing={-99.0: "refused", "x": "other"}),
    Variable(name="d", type="category", levels={1: "girl", 2: "boy"}, missing={-9: "none"}),
    Variable(name="e", type="category", levels={"girl": "g", "boy": "b", "3": "three"}, missing={"-99": "no"}),
    Variable(name="f", type="text", missing={" -99 ": "never matches stripped text", "NA": "na"}),
    Variable(name="g", type="date", missing={"1900-01-01": "unknown"}),
    Variable(name="h", type="number"),
]


def same(a, b):
    a, b = list(a), list(b)
    assert len(a) == len(b)
    for x, y in zip(a, b):
        assert type(x) is type(y) and (x == y or (x is None and y is None) or (x != x and y != y)), (x, y)


@pytest.mark.parametrize("column", list(columns()))
def test_per_column_functions_equal_the_per_value_ones(column):
    raw = columns()[column]
    same(wave_keys(raw), [wave_key(v) for v in raw.astype(object)])
    to_text = lambda v: None if v is None or (isinstance(v, float) and np.isnan(v)) else str(v)  # noqa: E731
    same(text_column(raw), [to_text(v) for v in raw.astype(object)])
    for codes in ([1, 2], ["girl", "boy", "3"], [1.5, 2]):
        same(level_column(raw, codes), [level_of(v, codes) for v in raw.astype(object)])
    waves = [1, 2, 3]
    lookup = {wave_key(w): i for i, w in enumerate(waves)}
    assert wave_positions(raw, waves).tolist() == [lookup.get(wave_key(v), -1) for v in raw.astype(object)]
    for var in VARIABLES:
        got, ref = match_missing(raw, var), ref_match_missing(raw, var)
        same(got, ref)
        values, hit = clean_values(raw, var)
        same(hit, ref)
        if var.type == "text":  # what Series.map gave, through pandas' inference of the result type
            same(values, raw.where(ref.isna(), None).map(to_text).to_numpy(dtype=object))
        if var.type == "category":  # the Categorical of level_of of every non-code cell
            expected = pd.Categorical(raw.where(ref.isna(), None).map(lambda v: level_of(v, list(var.levels))),
                                      categories=list(var.levels))
            assert list(values.codes) == list(expected.codes)


def test_map_column_passes_cells_as_series_map_does():
    f = pd.Series([1.0, np.nan, 2.0])
    # a function that tells None from NaN sees NaN for an empty float cell, as Series.map passes it
    same(map_column(f, lambda v: None if v is None else str(v)), ["1.0", "nan", "2.0"])
    o = pd.Series(["a", None, np.nan], dtype=object)
    same(map_column(o, lambda v: None if v is None else str(v)), ["a", None, "nan"])
    # -0.0 and 0.0 stay apart (they print differently)
    same(map_column(pd.Series([0.0, -0.0]), str), ["0.0", "-0.0"])


def test_missing_code_look_equals_value_by_value():
    rng = np.random.default_rng(7)
    v = np.concatenate([rng.integers(-12, 12, 300), [99, 98, 97, 77, 88, 999, 9999, -99, -999, 979, 89, 7, 9,
                                                     1e12, -1.5, np.nan, np.inf, -np.inf, 0]]).astype(float)
    assert looks_like_missing_code(v).tolist() == ref_looks_like_missing_code(v).tolist()
    assert looks_like_missing_code(np.array([np.nan, 1.5])).tolist() == [False, False]


def _tricky_file(path, n=800, seed=2, quote_header=False):
    rng = np.random.default_rng(seed)
    head = '"pid","wave","x","y","z","b","e"' if quote_header else "pid,wave,x,y,z,b,e"
    lines = [head]
    for i in range(n):
        lines.append(",".join([str(i // 3 + 1), str(rng.choice(["1", "2", "3", "1.0", " 2 "])),
                               f"{rng.normal() * 10.0 ** rng.integers(-3, 6):.6g}",
                               str(rng.choice(["1", "2", "-99", "", "NA", " 3 ", "2.0", "."])),
                               str(rng.choice(["a", "b", " c", "NAN", "True", "-99.0"])),
                               str(rng.choice(["True", "False"])),
                               str(rng.choice(["inf", "1", "-Infinity", "nan", "1e400", "007"]))]))
    lines[40:40] = ["", "   ", ",,,,,,", "\t", "  7,1,2.5,3,a,True,1", "\t8,2,1,2,b,False,inf"]
    path.write_bytes(("\n".join(lines) + "\n").replace("\n", "\r\n").encode())
    return path


@pytest.mark.parametrize("quote_header,scan_bytes", [(False, 32 << 20), (True, 32 << 20), (False, 97), (True, 5)])
def test_columnar_reader_equals_line_by_line(tmp_path, monkeypatch, quote_header, scan_bytes):
    path = _tricky_file(tmp_path / "tricky.csv", quote_header=quote_header)
    monkeypatch.setattr(readers, "FAST_BYTES", 0)
    monkeypatch.setattr(readers, "_SCAN_BYTES", scan_bytes)  # pieces end mid-file, even mid-line
    fast = readers._read_delimited_columnar(path, None)
    assert fast is not None  # the file is one the columnar reader takes
    monkeypatch.setattr(readers, "FAST_BYTES", 1 << 40)
    slow = readers.read_table(path)
    assert fast.rows.tolist() == slow.rows.tolist()
    assert list(fast.frame.columns) == list(slow.frame.columns)
    for c in slow.frame:
        a, b = fast.frame[c], slow.frame[c]
        assert a.dtype == b.dtype, c
        same(a.astype(object), b.astype(object))


@pytest.mark.parametrize("damage", ["short", "long", "quote", "dup_header", "long_then_short"])
def test_columnar_reader_hands_odd_files_to_the_line_parser(tmp_path, monkeypatch, damage):
    path = _tricky_file(tmp_path / "bad.csv")
    text = path.read_bytes().decode()
    lines = text.split("\r\n")
    if damage == "short":
        lines[300] = "1,2,3"
    elif damage == "long":
        lines[300] = lines[300] + ",9"
    elif damage == "quote":
        lines[300] = '1,1,2,"a\r\nb",x,True,1'
    elif damage == "long_then_short":  # the first record one field too many, a later one too few
        lines[1] = lines[1] + ",9"
        lines[300] = lines[300].rsplit(",", 1)[0]
    else:
        lines[0] = "pid,wave,x,y,x,b,e"
    path.write_bytes("\r\n".join(lines).encode())
    assert readers._read_delimited_columnar(path, None) is None
    monkeypatch.setattr(readers, "_SCAN_BYTES", 64)
    assert readers._read_delimited_columnar(path, None) is None
    monkeypatch.setattr(readers, "FAST_BYTES", 0)
    if damage in ("short", "long", "dup_header", "long_then_short"):
        with pytest.raises(readers.DataError, match="bad.csv:(301|1|2):"):
            readers.read_table(path)
    else:
        assert len(readers.read_table(path).frame) == 803  # 800 records, the line of commas, two lines starting blank


@pytest.mark.parametrize("damage,message", [("latin1", r"bad.csv:301: the file is not UTF-8 text \(byte 0xe9"),
                                            ("nul", "bad.csv:301: the file holds NUL bytes")])
def test_columnar_reader_leaves_unreadable_bytes_to_the_line_parser(tmp_path, monkeypatch, damage, message):
    path = _tricky_file(tmp_path / "bad.csv")
    lines = path.read_bytes().split(b"\r\n")
    lines[300] = lines[300] + (b"\xe9" if damage == "latin1" else b"\x00")
    path.write_bytes(b"\r\n".join(lines))
    monkeypatch.setattr(readers, "_SCAN_BYTES", 128)
    assert readers._read_delimited_columnar(path, None) is None
    monkeypatch.setattr(readers, "FAST_BYTES", 0)
    with pytest.raises(readers.DataError, match=message):
        readers.read_table(path)


def test_columnar_reader_skips_a_byte_order_mark(tmp_path, monkeypatch):
    path = _tricky_file(tmp_path / "bom.csv")
    path.write_bytes(b"\xef\xbb\xbf" + path.read_bytes())
    monkeypatch.setattr(readers, "_SCAN_BYTES", 50)
    fast = readers._read_delimited_columnar(path, None)
    assert fast is not None and list(fast.frame.columns)[0] == "pid"
    monkeypatch.setattr(readers, "FAST_BYTES", 1 << 40)
    slow = readers.read_table(path)
    assert fast.rows.tolist() == slow.rows.tolist()
    for c in slow.frame:
        same(fast.frame[c].astype(object), slow.frame[c].astype(object))


@pytest.mark.parametrize("id_kind", ["int", "text", "int_with_gaps"])
def test_long_rows_are_the_first_record_of_each_pair_sorted_by_id_and_wave(id_kind):
    from wavetrail.codebook import parse_codebook
    from wavetrail.panel import load_panel

    rng = np.random.default_rng(5)
    n = 600
    ids = rng.integers(1, 90, n)
    frame = pd.DataFrame({"pid": ids, "wave": rng.choice([3, 1, 2, 7], n), "x": np.arange(n, dtype=float)})
    if id_kind == "text":
        frame["pid"] = [f"p{i:03d}" if i % 7 else f" q{i}" for i in ids]
    elif id_kind == "int_with_gaps":
        frame["pid"] = frame["pid"].astype(object)
        frame.loc[rng.random(n) < 0.05, "pid"] = None
    cb = parse_codebook("study: {id: pid, wave: wave, waves: [1, 2, 3]}\n"
                        "variables:\n  - {name: pid, type: text, identifier: true}\n"
                        "  - {name: x, type: number}\n")
    long = load_panel(frame, cb).long
    # the reference: records with an id and a known wave, the first of each (id, wave), sorted by id then wave
    ref = frame[frame["pid"].notna() & frame["wave"].isin([1, 2, 3])]
    ref = ref.assign(pid=ref["pid"].map(lambda v: v.strip() if isinstance(v, str) else int(v)))
    ref = ref.drop_duplicates(["pid", "wave"], keep="first").sort_values(["pid", "wave"], kind="mergesort")
    assert len(ref) < (frame["pid"].notna() & frame["wave"].isin([1, 2, 3])).sum()  # duplicates were dropped
    assert long["pid"].tolist() == ref["pid"].tolist()
    assert long["wave"].tolist() == ref["wave"].tolist()
    assert long["x"].tolist() == ref["x"].tolist()  # the first record's values


def test_missing_code_look_on_many_and_huge_numbers():
    rng = np.random.default_rng(11)
    v = np.concatenate([rng.integers(-100_000, 100_000, 50_000),
                        [777_777_777_777, 8_888_888_888_888_888_888, 999_999_999_999_999_998, 2.0 ** 63, -2.0 ** 63,
                         9.3e18, 1e19, -77, -97, 9997, 99_999, 7, 77.5]]).astype(float)
    with np.errstate(invalid="ignore"):
        assert looks_like_missing_code(v).tolist() == ref_looks_like_missing_code(v).tolist()


# --------------------------------------------------------------------------- tidy panel from sorted records

SORTED_CODEBOOK = """\
study:
  id: pid
  wave: wave
  waves: [1, 2, 3]
  time_scores: [0, 1, 2]
variables:
  - {name: pid, type: integer}
  - {name: it1, type: integer, range: [1, 5], missing: {-99: refused}, scale: mood}
  - {name: it2, type: integer, range: [1, 5], missing: {-99: refused}, scale: mood}
  - {name: it3, type: integer, range: [1, 5], missing: {-99: refused}, scale: mood}
  - {name: sex, type: category, levels: {1: girl, 2: boy}, missing: {9: not said}}
  - {name: hours, type: number}
scales:
  mood: {label: Mood}
"""


def _sorted_panel_frame(n_people=300, seed=5):
    rng = np.random.default_rng(seed)
    rows = [(p, w) for p in range(1, n_people + 1) for w in (1, 2, 3) if w == 1 or rng.random() < 0.8]
    d = pd.DataFrame(rows, columns=["pid", "wave"])
    for k in (1, 2, 3):
        d[f"it{k}"] = rng.integers(1, 6, len(d))
        d.loc[rng.random(len(d)) < 0.05, f"it{k}"] = -99
        d.loc[rng.random(len(d)) < 0.01, f"it{k}"] = 7  # out of range
    d["sex"] = rng.integers(1, 3, len(d))
    d.loc[rng.random(len(d)) < 0.03, "sex"] = 9
    d["hours"] = rng.gamma(2.0, 3.0, len(d)).round(1)
    return d


def test_records_in_order_and_shuffled_give_the_same_panel_and_findings(tmp_path):
    """Sorted records take the run-based path (no hashing or sort of the (id, wave) pairs);
    shuffled ones the sort; both must give the same long table, reasons and findings
    (the file rows aside, which differ by construction)."""
    from wavetrail.checks import describe, run_checks
    from wavetrail.codebook import load_codebook
    from wavetrail.panel import load_panel

    (tmp_path / "cb.yaml").write_text(SORTED_CODEBOOK)
    cb = load_codebook(tmp_path / "cb.yaml")
    d = _sorted_panel_frame()
    d.to_csv(tmp_path / "sorted.csv", index=False)
    d.sample(frac=1.0, random_state=3).to_csv(tmp_path / "shuffled.csv", index=False)
    a, b = load_panel([tmp_path / "sorted.csv"], cb), load_panel([tmp_path / "shuffled.csv"], cb)
    pd.testing.assert_frame_equal(a.long, b.long)
    pd.testing.assert_frame_equal(a.missing_reasons, b.missing_reasons)
    assert len(a.missing_reasons) == int((d[["it1", "it2", "it3"]] == -99).sum().sum() + (d["sex"] == 9).sum())
    fa, fb = run_checks(a).drop(columns="rows"), run_checks(b).drop(columns="rows")
    pd.testing.assert_frame_equal(fa, fb)
    assert set(fa["check"]) >= {"missing_code", "out_of_range"}
    assert "duplicate_id" not in set(fa["check"])
    pd.testing.assert_frame_equal(describe(a), describe(b))


def test_long_table_shares_unchanged_read_columns_but_writes_stay_apart(tmp_path):
    """Columns that cleaning leaves as read (the id; a number column without codes) are not
    copied into the long table, and copy-on-write keeps a change to one out of the other."""
    from wavetrail.codebook import load_codebook
    from wavetrail.panel import load_panel

    (tmp_path / "cb.yaml").write_text(SORTED_CODEBOOK)
    d = _sorted_panel_frame()
    d.to_csv(tmp_path / "p.csv", index=False)
    panel = load_panel([tmp_path / "p.csv"], load_codebook(tmp_path / "cb.yaml"))
    assert np.shares_memory(panel.long["hours"].to_numpy(), panel.records["hours"].to_numpy())
    assert np.shares_memory(panel.long["pid"].to_numpy(), panel.records["pid"].to_numpy())
    assert not np.shares_memory(panel.long["it1"].to_numpy(), panel.records["it1"].to_numpy())
    first_hours, first_id = panel.records["hours"].iloc[0], panel.records["pid"].iloc[0]
    panel.long.loc[0, "hours"] = -1.0
    panel.long.loc[0, "pid"] = -5
    assert panel.records["hours"].iloc[0] == first_hours and panel.records["pid"].iloc[0] == first_id
    assert panel.long["hours"].iloc[0] == -1.0
    # the code cells are blank in the long table and kept as read in the records
    assert np.isnan(panel.long["it1"].to_numpy()[(d["it1"] == -99).to_numpy()]).all()
    assert (panel.records["it1"].to_numpy()[(d["it1"] == -99).to_numpy()] == -99).all()


def _plain_file(path, n=600, seed=4, last_gaps=False):
    """A plain long file (ASCII, no quotes): the one-pass line count applies."""
    rng = np.random.default_rng(seed)
    lines = ["pid,wave,it,sex,hours"]
    for i in range(n):
        hours = "" if last_gaps and rng.random() < 0.1 else f"{rng.gamma(2.0, 3.0):.1f}"
        lines.append(f"{i // 3 + 1},{i % 3 + 1},{rng.choice(['1', '2', '-99', ''])},{rng.integers(1, 3)},{hours}")
    return lines


@pytest.mark.parametrize("damage", ["none", "crlf", "trailing_blank", "blank_middle", "space_line", "bom",
                                    "no_final_newline", "leading_blank", "short", "short_gaps", "long",
                                    "lone_cr", "late_quote", "tab_line"])
def test_one_pass_line_count_equals_the_line_scan(tmp_path, monkeypatch, damage):
    """Plain files are counted in one pass (records = lines 2, 3, ... when pandas finds one record per line);
    any blank or odd line sends the file to the line scan. Either way the rows, values and the refusals
    are those of the line-by-line parser."""
    lines = _plain_file(tmp_path, last_gaps=damage == "short_gaps")
    end = "\n"
    if damage == "crlf":
        end = "\r\n"
    elif damage == "blank_middle":
        lines[100:100] = [""]
    elif damage == "space_line":
        lines[100:100] = ["   "]
    elif damage == "tab_line":
        lines[100:100] = ["\t \t"]
    elif damage == "leading_blank":
        lines[0:0] = [""]
    elif damage in ("short", "short_gaps"):
        lines[300] = lines[300].rsplit(",", 1)[0]
    elif damage == "long":
        lines[300] = lines[300] + ",1"
    elif damage == "lone_cr":
        lines[300] = lines[300] + "\r" + lines[301]
        del lines[301]
    elif damage == "late_quote":
        pid, _, rest = lines[301].split(",", 2)
        lines[301] = f'{pid},"2",{rest}'  # a quoted wave deep in the file
    data = end.join(lines) + ("" if damage == "no_final_newline" else end)
    if damage == "trailing_blank":
        data += "\n\n"
    raw = data.encode()
    if damage == "bom":
        raw = b"\xef\xbb\xbf" + raw
    path = tmp_path / "plain.csv"
    path.write_bytes(raw)
    scans = []
    real_scan = readers._scan_lines
    monkeypatch.setattr(readers, "_scan_lines", lambda *a: scans.append(1) or real_scan(*a))
    monkeypatch.setattr(readers, "FAST_BYTES", 0)
    monkeypatch.setattr(readers, "_SCAN_BYTES", 1000)  # blocks end mid-line (and mid-\r\n)
    fast = readers._read_delimited_columnar(path, None)
    if damage in ("none", "crlf", "bom", "no_final_newline", "short_gaps"):
        assert not scans  # counted in one pass, no line scan
    monkeypatch.setattr(readers, "FAST_BYTES", 1 << 40)
    try:
        slow = readers.read_table(path)
    except readers.DataError as exc:
        assert fast is None, exc
        assert damage in ("short", "short_gaps", "long")
        return
    if fast is None:  # refused by the columnar reader, read by the line parser (a lone \r, a quote)
        assert damage in ("lone_cr", "late_quote")
        return
    assert fast.rows.tolist() == slow.rows.tolist()
    assert fast.rows.dtype == np.int64
    assert list(fast.frame.columns) == list(slow.frame.columns)
    for c in slow.frame:
        assert fast.frame[c].dtype == slow.frame[c].dtype, c
        same(fast.frame[c].astype(object), slow.frame[c].astype(object))
    if damage == "blank_middle":
        assert fast.rows[98:101].tolist() == [100, 102, 103]  # the blank line 101 holds no record


def test_code_positions_equal_the_dense_code_index():
    """Declared codes as sorted positions and code places: what missing_code_index marks, first code first."""
    from wavetrail.panel import code_positions, missing_code_index

    for name, raw in columns().items():
        for var in VARIABLES + [Variable(name="z", type="number", missing={2**53: "a", 2**53 + 1: "b", -99: "c"})]:
            dense = missing_code_index(raw, var)
            sparse = code_positions(raw, var)
            if dense is None:
                assert sparse is None, (name, var.name)
                continue
            idx, kinds = sparse
            assert idx.tolist() == np.flatnonzero(dense >= 0).tolist(), (name, var.name)
            assert kinds.tolist() == dense[idx].tolist(), (name, var.name)
    big = pd.Series(np.array([2**53, 1, 2**53 + 1, -99], dtype=np.int64))  # 2**53 + 1 equals 2**53 as a float
    var = Variable(name="z", type="number", missing={2**53: "a", 2**53 + 1: "b", -99: "c"})
    idx, kinds = code_positions(big, var)
    assert idx.tolist() == [0, 2, 3] and kinds.tolist() == [0, 0, 2]


@pytest.mark.parametrize("values", [[3, 1, 2, 2, 7, 1], [0, 5, 5, 0], [-4, -1, 2, -4], [2**40, 1, 2]])
def test_integer_table_look_ups_equal_the_per_value_functions(values):
    from wavetrail.panel import _categorical, _distinct_values, factorize_column

    raw = pd.Series(np.asarray(values, dtype=np.int64))
    waves = [1, 2, 3, 5]
    lookup = {wave_key(w): i for i, w in enumerate(waves)}
    assert wave_positions(raw, waves).tolist() == [lookup.get(wave_key(v), -1) for v in values]
    assert wave_positions(raw, waves).dtype == np.int64
    assert _distinct_values(raw) == factorize_column(raw)[1]
    assert sorted(_distinct_values(raw)) == sorted(set(values))
    for codes in ([1, 2], [2, 1, 3], ["1", 5]):
        cat = _categorical(raw, codes, ordered=False)
        expected = pd.Categorical([level_of(v, codes) for v in values], categories=codes)
        assert cat.codes.tolist() == expected.codes.tolist() and cat.codes.dtype == expected.codes.dtype
