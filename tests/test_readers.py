"""Readers: every file kind, one clear message per broken file, long/wide/per-wave to one panel."""

import textwrap

import numpy as np
import pandas as pd
import pytest

from wavetrail.codebook import parse_codebook
from wavetrail.errors import DataError
from wavetrail.panel import load_panel
from wavetrail.readers import read_table
from wavetrail.scoring import score_panel

CODEBOOK = textwrap.dedent("""\
    study:
      id: pid
      wave: wave
      waves: [1, 2, 3]
    variables:
      - {name: pid, type: integer}
      - {name: it1, type: integer, range: [1, 5], missing: {-99: refused}, scale: mood}
      - {name: it2, type: integer, range: [1, 5], missing: {-99: refused}, scale: mood}
      - {name: it3, type: integer, range: [1, 5], missing: {-99: refused}, scale: mood, reverse: true}
      - {name: sex, type: category, levels: {1: girl, 2: boy}, waves: [1]}
    scales:
      mood: {label: Mood, min_share: 0.6}
    """)


def long_frame(n=30, seed=3):
    rng = np.random.default_rng(seed)
    rows = []
    for pid in range(1, n + 1):
        for wave in (1, 2, 3):
            if wave > 1 and rng.random() < 0.15:
                continue
            rows.append({"pid": pid, "wave": wave, "it1": int(rng.integers(1, 6)), "it2": int(rng.integers(1, 6)),
                         "it3": int(rng.integers(1, 6)), "sex": int(rng.integers(1, 3)) if wave == 1 else np.nan})
    df = pd.DataFrame(rows)
    df.loc[[4, 11], "it2"] = -99
    df.loc[[7], "it1"] = np.nan
    return df


@pytest.fixture
def cb():
    return parse_codebook(CODEBOOK)


# ------------------------------------------------------------------ broken text files: one message each

def _message(path, **kw):
    with pytest.raises(DataError) as info:
        read_table(path, **kw)
    msg = str(info.value)
    assert path.name in msg and "Traceback" not in msg
    return msg


def test_empty_file(tmp_path):
    p = tmp_path / "empty.csv"
    p.write_bytes(b"")
    assert "the file is empty" in _message(p)
    p.write_bytes(b"\n \n")
    assert "empty" in _message(p)


def test_non_utf8_file(tmp_path):
    p = tmp_path / "latin.csv"
    p.write_bytes("pid,town\n1,K\u00f6ln\n2,Graz\n".encode("latin-1"))
    msg = _message(p)
    assert "latin.csv:2: the file is not UTF-8" in msg and "Latin-1" in msg


def test_truncated_file(tmp_path):
    p = tmp_path / "cut.csv"
    p.write_text("pid,wave,it1,it2\n1,1,3,4\n2,1,5,2\n3,1")
    msg = _message(p)
    assert "cut.csv:4: the line has 2 field(s) but the header has 4" in msg


def test_corrupt_quote(tmp_path):
    p = tmp_path / "quote.csv"
    p.write_text('pid,wave,note\n1,1,"fine"\n2,1,"never closed\n3,1,x\n')
    msg = _message(p)
    assert "cannot be parsed" in msg or "field(s)" in msg


def test_binary_garbage(tmp_path):
    p = tmp_path / "bin.csv"
    p.write_bytes(b"pid,wave\n1,1\n\x00\x00\x17\x00")
    assert "NUL bytes" in _message(p)


def test_wrong_delimiter(tmp_path):
    p = tmp_path / "semi.csv"
    p.write_text("pid;wave;it1\n1;1;3\n2;1;4\n")
    msg = _message(p, delimiter=",")
    assert "the delimiter is wrong" in msg and "semicolon" in msg
    # header with commas, rows with semicolons: caught, not silently read
    q = tmp_path / "mixed.csv"
    q.write_text("pid,wave,it1\n1;1;3\n2;1;4\n")
    assert "different delimiters" in _message(q)


def test_repeated_header(tmp_path):
    p = tmp_path / "dup.csv"
    p.write_text("pid,wave,it1,it1\n1,1,3,4\n")
    assert "column 'it1' appears twice" in _message(p)


def test_unknown_kind_and_missing_file(tmp_path):
    p = tmp_path / "data.json"
    p.write_text("{}")
    assert "unknown data file kind" in _message(p)
    with pytest.raises(DataError, match="does not exist"):
        read_table(tmp_path / "gone.csv")


def test_corrupt_parquet_and_excel(tmp_path):
    for name in ("broken.parquet", "broken.xlsx", "broken.sav", "broken.dta"):
        p = tmp_path / name
        p.write_bytes(b"this is not a real file of that kind" * 3)
        assert "cannot be read" in _message(p)


# ------------------------------------------------------------------ delimiters and values

@pytest.mark.parametrize("sep, suffix", [(",", ".csv"), (";", ".csv"), ("\t", ".tsv"), ("|", ".txt")])
def test_delimiters_are_sniffed(tmp_path, sep, suffix):
    df = long_frame()
    p = tmp_path / f"data{suffix}"
    df.to_csv(p, sep=sep, index=False)
    t = read_table(p)
    assert list(t.frame.columns) == list(df.columns)
    np.testing.assert_array_equal(t.frame["it2"].to_numpy(dtype=float), df["it2"].to_numpy(dtype=float))
    assert t.rows[0] == 2 and t.rows[-1] == len(df) + 1
    assert t.frame["pid"].dtype == np.int64


def test_decimal_comma_file_with_semicolons(tmp_path):
    p = tmp_path / "eu.csv"
    p.write_text("pid;wave;height\n1;1;1,52\n2;1;1,61\n")
    t = read_table(p)
    assert list(t.frame.columns) == ["pid", "wave", "height"]
    assert t.frame["height"].tolist() == ["1,52", "1,61"]  # text: the checks report a type mismatch


# ------------------------------------------------------------------ every format, one panel

def _write_all(tmp_path, df):
    pyreadstat = pytest.importorskip("pyreadstat")
    paths = {}
    paths["csv"] = tmp_path / "p.csv"
    df.to_csv(paths["csv"], index=False)
    paths["xlsx"] = tmp_path / "p.xlsx"
    df.to_excel(paths["xlsx"], index=False)
    paths["parquet"] = tmp_path / "p.parquet"
    df.to_parquet(paths["parquet"], index=False)
    paths["sav"] = tmp_path / "p.sav"
    pyreadstat.write_sav(df.astype(float), str(paths["sav"]))
    paths["dta"] = tmp_path / "p.dta"
    pyreadstat.write_dta(df.astype(float), str(paths["dta"]))
    return paths


def test_all_formats_give_the_same_scores(tmp_path, cb):
    df = long_frame()
    paths = _write_all(tmp_path, df)
    ref = score_panel(load_panel(paths["csv"], cb))
    assert ref["score"].notna().sum() > 50
    for kind, path in paths.items():
        panel = load_panel(path, cb)
        got = score_panel(panel)
        pd.testing.assert_frame_equal(got, ref, check_dtype=False, obj=kind)
        assert panel.long["sex"].dtype == "category"
        assert len(panel.missing_reasons) == 2 and set(panel.missing_reasons["reason"]) == {"refused"}


def test_long_wide_and_per_wave_files_give_one_form(tmp_path, cb):
    df = long_frame()
    long_panel = load_panel(df, cb)
    # wide
    wide = df.pivot(index="pid", columns="wave")
    wide.columns = [f"{name}_w{w}" for name, w in wide.columns]
    wide = wide.drop(columns=["sex_w2", "sex_w3"]).reset_index()
    cbw = parse_codebook(CODEBOOK.replace("  wave: wave\n", '  wide: "{name}_w{wave}"\n'))
    wide_panel = load_panel(wide, cbw)
    a = long_panel.long.rename(columns={"wave": "wave"})
    b = wide_panel.long
    pd.testing.assert_frame_equal(a.reset_index(drop=True), b.reset_index(drop=True), check_dtype=False)
    # one file per wave, no wave column, in wave order
    files = []
    for w in (1, 2, 3):
        p = tmp_path / f"wave{w}.csv"
        df[df["wave"] == w].drop(columns="wave").to_csv(p, index=False)
        files.append(p)
    per_wave = load_panel(files, cb)
    pd.testing.assert_frame_equal(a.reset_index(drop=True), per_wave.long.reset_index(drop=True),
                                  check_dtype=False)
    assert [s.waves for s in per_wave.sources] == [[1], [2], [3]]


def test_missing_id_column_is_one_message(tmp_path, cb):
    p = tmp_path / "noid.csv"
    long_frame().rename(columns={"pid": "pidd"}).to_csv(p, index=False)
    with pytest.raises(DataError, match=r"(?s)noid.csv: the id column 'pid' .* did you mean 'pidd'"):
        load_panel(p, cb)


def test_baseline_and_predictors(cb):
    panel = load_panel(long_frame(), cb)
    base = panel.baseline()
    assert base.index.name == "pid" and base.index.is_unique and len(base) == 30
    pred = panel.predictors("wave1")
    assert list(pred.columns) == ["sex"]
    assert pred["sex"].dtype == "category"
    with pytest.raises(DataError, match="not in the codebook"):
        panel.predictors(["nothing"])
