"""The check suite: each check fires on a crafted bad file and stays quiet on a clean one."""

import textwrap

import re

import numpy as np
import pandas as pd
import pytest

from wavetrail.checks import attrition, describe, looks_like_missing_code, run_checks
from wavetrail.codebook import parse_codebook
from wavetrail.errors import DataError
from wavetrail.panel import load_panel

CODEBOOK = textwrap.dedent("""\
    study:
      id: pid
      wave: wave
      waves: [1, 2, 3]
      time_scores: [0, 1, 2]
    variables:
      - {name: pid, type: integer}
      - {name: it1, type: integer, range: [1, 5], missing: {-99: refused, -98: do not know}, scale: mood}
      - {name: it2, type: integer, range: [1, 5], missing: {-99: refused, -98: do not know}, scale: mood}
      - {name: it3, type: integer, range: [1, 5], missing: {-99: refused, -98: do not know}, scale: mood}
      - {name: it4, type: integer, range: [1, 5], missing: {-99: refused, -98: do not know}, scale: mood, reverse: true}
      - {name: sex, type: category, levels: {1: girl, 2: boy}, waves: [1]}
      - {name: visit, type: date}
      - {name: hours, type: number}
      - {name: email, type: text, identifier: true}
    scales:
      mood: {label: Mood}
    """)


def clean_frame(n=40, seed=11, dropout=True):
    """A clean long panel: no codes, no duplicates, nobody straight-lines, people only drop out."""
    rng = np.random.default_rng(seed)
    rows = []
    for pid in range(1, n + 1):
        gone = False
        for wave in (1, 2, 3):
            gone = gone or (dropout and wave > 1 and rng.random() < 0.2)
            if gone:
                break
            items = rng.integers(1, 6, 4)
            while len(set(items)) == 1:
                items = rng.integers(1, 6, 4)
            rows.append({"pid": pid, "wave": wave, "it1": items[0], "it2": items[1], "it3": items[2],
                         "it4": items[3], "sex": int(rng.integers(1, 3)) if wave == 1 else np.nan,
                         "visit": f"2026-0{wave}-1{pid % 10}", "hours": round(float(rng.uniform(5, 10)), 1),
                         "email": f"p{pid}@example.org"})
    return pd.DataFrame(rows)


def findings_for(tmp_path, frame, cb_text=CODEBOOK, name="panel.csv"):
    path = tmp_path / name
    frame.to_csv(path, index=False)
    return run_checks(path, parse_codebook(cb_text))


def _set(df, row, col, value):
    df = df.copy()
    df[col] = df[col].astype(object)
    df.loc[row, col] = value
    return df


def _with_row(df, row):
    return pd.concat([df, pd.DataFrame([row])], ignore_index=True)


CASES = {
    # check: (mutation (frame, codebook) -> (frame, codebook), severity, variable, wave)
    "unknown_column": (lambda d, c: (d.assign(extra=1), c), "warning", "extra", None),
    "missing_column": (lambda d, c: (d.drop(columns="it3"), c), "error", "it3", None),
    "type_mismatch": (lambda d, c: (_set(d, 0, "it1", "abc"), c), "error", "it1", 1),
    "out_of_range": (lambda d, c: (_set(d, 0, "it1", 6), c), "error", "it1", 1),
    "unknown_level": (lambda d, c: (_set(d, 0, "sex", 3), c), "error", "sex", 1),
    "suspected_missing_code": (lambda d, c: (_set(d, 3, "it2", 99), c), "error", "it2", None),
    "missing_code": (lambda d, c: (_set(d, 3, "it2", -98), c), "info", "it2", None),
    # a value at an unlisted wave that differs from the person's value at the listed wave
    # (a value that repeats it is an info finding: see test_time_invariant_repeats_once)
    "unexpected_wave": (lambda d, c: (_set(d, d.index[d["wave"] == 2][0], "sex",
                                           3 - d.loc[(d["pid"] == d.loc[d.index[d["wave"] == 2][0], "pid"])
                                                     & (d["wave"] == 1), "sex"].iloc[0]), c),
                        "warning", "sex", 2),
    "missing_id": (lambda d, c: (_set(d, 2, "pid", None), c), "error", "pid", None),
    "unknown_wave": (lambda d, c: (_set(d, 2, "wave", 7), c), "error", "wave", None),
    "duplicate_id": (lambda d, c: (_with_row(d, d.iloc[4].to_dict()), c), "error", "pid", None),
    "late_entry": (lambda d, c: (_with_row(d, {**d.iloc[1].to_dict(), "pid": 999, "wave": 2}), c),
                   "warning", "pid", 2),
    "wave_coverage": (lambda d, c: (d, c.replace("waves: [1, 2, 3]\n  time_scores: [0, 1, 2]",
                                                 "waves: [1, 2, 3, 4]\n  time_scores: [0, 1, 2, 3]")),
                      "warning", "wave", 4),
    "straight_lining": (lambda d, c: (d.assign(**{f"it{i}": d[f"it{i}"].where(d.index != 6, 2) for i in range(1, 5)}),
                                      c), "warning", "mood", None),
    "identifier": (lambda d, c: (d, c), "info", "email", None),
}


@pytest.mark.parametrize("check", sorted(CASES))
def test_check_fires_on_bad_file_only(tmp_path, check):
    mutate, severity, variable, wave = CASES[check]
    clean_cb = CODEBOOK if check != "identifier" else CODEBOOK.replace(", identifier: true", "")
    clean = findings_for(tmp_path, clean_frame(), clean_cb, "clean.csv")
    assert not (clean["severity"] == "error").any(), clean[clean["severity"] == "error"]
    if check != "wave_coverage":
        assert check not in set(clean["check"]), clean[clean["check"] == check]
    else:
        assert not ((clean["check"] == check) & (clean["severity"] != "info")).any()
    frame, cb_text = mutate(clean_frame(), CODEBOOK)
    bad = findings_for(tmp_path, frame, cb_text, "bad.csv")
    hit = bad[(bad["check"] == check) & (bad["severity"] == severity) & (bad["variable"] == variable)]
    assert len(hit) >= 1, bad
    if wave is not None:
        assert wave in set(hit["wave"]), hit
    assert (hit["count"] >= 1).all() or check == "wave_coverage"
    if check not in ("unknown_column", "missing_column", "identifier", "wave_coverage"):
        assert hit["rows"].str.match(r"bad\.csv:\d+").all(), hit["rows"]
    # findings are shared with reviewers: no message quotes a person id, the rows locate the records
    for message in bad["message"]:
        assert not re.search(r"\bpids?\b[ \t:=#]*\d", message), message


def test_example_rows_point_at_the_file_line(tmp_path):
    d = _set(clean_frame(), 5, "it1", 6)
    f = findings_for(tmp_path, d, name="bad.csv")
    hit = f[f["check"] == "out_of_range"].iloc[0]
    assert hit["rows"] == "bad.csv:7"  # data row 5 = line 7 (header on line 1)
    assert hit["count"] == 1 and "outside the range [1, 5] (e.g. 6)" in hit["message"]


def test_suspected_code_without_range_is_a_warning(tmp_path):
    d = _set(clean_frame(), 3, "hours", -9)
    f = findings_for(tmp_path, d)
    hit = f[f["check"] == "suspected_missing_code"]
    assert list(hit["severity"]) == ["warning"] and list(hit["variable"]) == ["hours"]


def test_other_type_mismatches(tmp_path):
    d = _set(_set(clean_frame(), 5, "it1", 2.5), 8, "visit", "yesterday")
    f = findings_for(tmp_path, d)
    tm = f[f["check"] == "type_mismatch"]
    assert set(tm["variable"]) == {"it1", "visit"}


def test_declared_codes_become_missing_with_reasons(tmp_path):
    d = _set(_set(clean_frame(), 3, "it2", -98), 9, "it4", -99)
    path = tmp_path / "p.csv"
    d.to_csv(path, index=False)
    panel = load_panel(path, parse_codebook(CODEBOOK))
    assert panel.long["it2"].isna().sum() == 1 and panel.long["it4"].isna().sum() == 1
    mr = panel.missing_reasons.sort_values("variable").reset_index(drop=True)
    assert mr["reason"].tolist() == ["do not know", "refused"] and mr["code"].tolist() == ["-98", "-99"]


def test_per_wave_files_renamed_column_duplicate_and_missing_id(tmp_path):
    d = clean_frame(dropout=False)
    files = []
    for w in (1, 2, 3):
        part = d[d["wave"] == w].drop(columns="wave")
        if w == 3:
            part = part.rename(columns={"it1": "it_1"})  # renamed in one wave
        if w == 2:
            part = pd.concat([part, part.iloc[[0]]], ignore_index=True)  # duplicated id
            part = part[part["pid"] != 5]  # one id missing in this wave
        p = tmp_path / f"wave{w}.csv"
        part.to_csv(p, index=False)
        files.append(p)
    f = run_checks(files, parse_codebook(CODEBOOK))
    unknown = f[f["check"] == "unknown_column"].iloc[0]
    assert unknown["variable"] == "it_1" and unknown["wave"] == 3 and "renamed it1?" in unknown["message"]
    missing = f[f["check"] == "missing_column"].iloc[0]
    assert missing["variable"] == "it1" and missing["wave"] == 3 and missing["severity"] == "error"
    dup = f[f["check"] == "duplicate_id"].iloc[0]
    assert dup["wave"] == 2 and dup["count"] == 1 and dup["rows"].startswith("wave2.csv:")
    att = f[(f["check"] == "attrition") & (f["wave"] == 2)].iloc[0]
    assert att["count"] == 1 and "39 of 40" in att["message"]


def test_attrition_and_descriptives_tables():
    panel = load_panel(clean_frame(), parse_codebook(CODEBOOK))
    a = attrition(panel)
    assert a["n_present"].iloc[0] == 40 and a["retention"].iloc[0] == 1.0
    assert (a["n_present"].diff().dropna() <= 0).all()  # people only drop out here
    assert (a["n_present"] + a["n_missing"] == 40).all()
    desc = describe(panel)
    assert "email" not in set(desc["variable"])  # identifiers never reach an output
    row = desc[(desc["variable"] == "it1") & (desc["wave"] == 1)].iloc[0]
    x = panel.long.loc[panel.long["wave"] == 1, "it1"]
    assert row["n"] == 40 and row["mean"] == pytest.approx(x.mean()) and row["sd"] == pytest.approx(x.std())


def test_code_like_values():
    got = looks_like_missing_code([-9, -1, 99, 999, 98, 9999, 5, 10, 100, -10, 88, 2.5])
    assert got.tolist() == [True, True, True, True, True, True, False, False, False, False, True, False]


def test_check_data_step_writes_findings_and_scoring_refuses(tmp_path):
    from wavetrail.stages.checks import check_data
    from wavetrail.stages.runner import Job
    from wavetrail.stages.scores import score_scales

    (tmp_path / "config").mkdir()
    (tmp_path / "config" / "codebook.yaml").write_text(CODEBOOK)
    (tmp_path / "data").mkdir()
    _set(clean_frame(), 5, "it1", 6).to_csv(tmp_path / "data" / "panel.csv", index=False)
    job = Job(step="check_data", project=tmp_path,
              input={"data": ["data/panel.csv"], "codebook": "config/codebook.yaml", "registry": "x"},
              output={"findings": "results/checks/findings.csv", "descriptives": "results/checks/descriptives.csv",
                      "attrition": "results/checks/attrition.csv"})
    check_data(job)  # succeeds, so Snakemake keeps the findings the user must read
    score = Job(step="score_scales", project=tmp_path,
                input={"data": ["data/panel.csv"], "codebook": "config/codebook.yaml",
                       "findings": "results/checks/findings.csv"},
                output={"scores": "results/scores/scores.csv"})
    with pytest.raises(DataError, match=r"1 check finding\(s\) with severity error, listed in "
                                        r"results/checks/findings.csv \(first: out_of_range in it1"):
        score_scales(score)
    assert not (tmp_path / "results/scores/scores.csv").exists()
    f = pd.read_csv(tmp_path / "results/checks/findings.csv")
    assert list(f.columns) == ["variable", "wave", "check", "severity", "count", "rows", "message"]
    assert f["severity"].iloc[0] == "error"
    assert "email" not in (tmp_path / "results/checks/descriptives.csv").read_text()
    clean_frame().to_csv(tmp_path / "data" / "panel.csv", index=False)
    check_data(job)
    first = (tmp_path / "results/checks/findings.csv").read_bytes()
    check_data(job)
    assert (tmp_path / "results/checks/findings.csv").read_bytes() == first  # byte-stable
