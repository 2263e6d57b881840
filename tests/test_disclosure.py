"""Disclosure check: identifier columns and values, copied raw rows, person ids, small cells."""

from __future__ import annotations

import json

import pandas as pd
import pytest

from test_archive_helpers import CODEBOOK, make_panel, make_project
from wavetrail._io import write_table
from wavetrail.archive import pack_project
from wavetrail.archive.disclosure import BLOCK, NOTE, check_outputs, is_count_column
from wavetrail.codebook import parse_codebook
from wavetrail.errors import ArchiveError
from wavetrail.panel import load_panel


@pytest.fixture(scope="module")
def real():
    cb = parse_codebook(CODEBOOK)
    return cb, load_panel(make_panel(150, seed=2), cb)


def _check(tmp_path, real, tables: dict, **kw):
    cb, panel = real
    files = {}
    for rel, content in tables.items():
        path = tmp_path / rel
        path.parent.mkdir(parents=True, exist_ok=True)
        if isinstance(content, pd.DataFrame):
            write_table(path, content)
        else:
            path.write_text(content, encoding="utf-8")
        files[rel] = path
    return check_outputs(files, cb, panel.long, **kw)


def test_identifier_column_copied_into_an_output_blocks(tmp_path, real):
    cb, panel = real
    leaked = panel.long[["wave", "email"]].head(20).assign(score=1.5)
    report = _check(tmp_path, real, {"results/x/leak.csv": leaked})
    kinds = set(report.blocking["check"])
    assert {"identifier column", "identifier value"} <= kinds
    row = report.blocking[report.blocking["check"] == "identifier column"].iloc[0]
    assert row["file"] == "results/x/leak.csv" and row["column"] == "email"
    assert not report.ok


def test_identifier_value_in_a_report_blocks_and_names_the_line(tmp_path, real):
    cb, panel = real
    email = panel.long["email"].dropna().iloc[7]
    html = "<html>\n<body>\n<p>outlier: " + email + "</p>\n</body></html>\n"
    report = _check(tmp_path, real, {"results/reports/report.html": html})
    hit = report.blocking.iloc[0]
    assert hit["check"] == "identifier value" and hit["row"] == 3


def test_cell_of_two_blocks_and_zero_does_not(tmp_path, real):
    table = pd.DataFrame({"group": ["a", "b", "c"], "n": [40, 2, 0], "mean": [1.0, 2.0, None]})
    report = _check(tmp_path, real, {"results/checks/counts.csv": table})
    small = report.blocking[report.blocking["check"] == "small cell"]
    assert len(small) == 1
    assert small.iloc[0]["row"] == 2 and small.iloc[0]["column"] == "n"
    assert "count 2 is below report.min_cell = 5" in small.iloc[0]["message"]
    # the threshold comes from the settings
    assert _check(tmp_path, real, {"results/checks/counts.csv": table}, min_cell=2).ok
    assert not _check(tmp_path, real, {"results/checks/counts.csv": table.assign(n=[40, 9, 0])},
                      min_cell=10).ok


def test_count_columns():
    assert all(is_count_column(c) for c in ("n", "count", "n_present", "N_missing", "frequency", "case_count"))
    assert not any(is_count_column(c) for c in ("n_items", "mean", "node", "rank"))


def test_copied_raw_rows_are_found(tmp_path, real):
    cb, panel = real
    raw = panel.long[["wave", "it1", "it2", "it3", "it4", "screen"]].head(30)
    closed = _check(tmp_path, real, {"results/x/rows.csv": raw}, data_included=False)
    rows = closed.findings[closed.findings["check"] == "raw row"]
    assert len(rows) == 1 and rows.iloc[0]["severity"] == BLOCK
    # with the raw data in the archive the same copy adds nothing: noted, not blocking
    open_ = _check(tmp_path, real, {"results/x/rows.csv": raw}, data_included=True)
    assert set(open_.findings.loc[open_.findings["check"] == "raw row", "severity"]) == {NOTE}
    # aggregated values are not rows of anyone
    agg = raw.groupby("wave").mean().reset_index()
    assert _check(tmp_path, real, {"results/x/agg.csv": agg}, data_included=False).ok


def test_person_keyed_tables_are_found(tmp_path, real):
    cb, panel = real
    scores = pd.DataFrame({"id": panel.long["pid"], "wave": panel.long["wave"], "score": 2.5})
    report = _check(tmp_path, real, {"results/scores/scores.csv": scores}, data_included=False)
    assert report.person_level == ["results/scores/scores.csv"]
    assert report.ok  # withheld, not blocking
    unrelated = pd.DataFrame({"id": [1, 2, 3], "value": [0.1, 0.2, 0.3]})
    assert _check(tmp_path, real, {"results/x/other.csv": unrelated}).person_level == []


def test_pack_refuses_on_disclosure_and_records_an_accepted_finding(tmp_path):
    small = "group,n\nall,120\nrare,2\n"
    root = make_project(tmp_path / "proj", n=120, email=False,
                        extra_outputs={"results/checks/groups.csv": small})
    with pytest.raises(ArchiveError) as err:
        pack_project(root, data="exclude")
    text = str(err.value)
    assert "results/checks/groups.csv, row 2, column 'n': count 2" in text and "--allow-disclosure" in text
    out = pack_project(root, data="exclude", allow_disclosure=True, output=tmp_path / "a.zip")
    import zipfile

    with zipfile.ZipFile(out) as zf:
        manifest = json.loads(zf.read("proj-exclude/data/wavetrail-archive.json"))
        readme = zf.read("proj-exclude/data/ARCHIVE-README.md").decode()
    assert manifest["disclosure"]["allowed"] is True
    assert any(f["check"] == "small cell" for f in manifest["disclosure"]["findings"])
    assert "count 2" in readme


def test_include_mode_refuses_raw_identifiers(tmp_path):
    root = make_project(tmp_path / "proj", n=80, email=True)
    with pytest.raises(ArchiveError, match="raw data column 'email' is an identifier"):
        pack_project(root, data="include")
    # the same project packs without the raw file
    assert pack_project(root, data="exclude", output=tmp_path / "x.zip").is_file()


def test_person_ids_named_in_text_are_found(tmp_path, real):
    cb, panel = real
    pids = panel.long["pid"].drop_duplicates().iloc[:3].tolist()
    findings = pd.DataFrame({"check": ["straight_lining"], "count": [12],
                             "rows": [f"pid {pids[0]}, {pids[1]}, {pids[2]}"]})
    closed = _check(tmp_path, real, {"results/checks/findings.csv": findings}, data_included=False)
    hit = closed.blocking[closed.blocking["check"] == "person ids"]
    assert len(hit) == 1 and hit.iloc[0]["row"] == 2
    assert f"pid {pids[0]}" in hit.iloc[0]["message"]
    # noted only when the raw data go along; numbers that are not real ids are no finding
    assert _check(tmp_path, real, {"results/checks/findings.csv": findings}, data_included=True).ok
    other = findings.assign(rows=["pid 1, 2"])
    assert _check(tmp_path, real, {"results/checks/findings.csv": other}, data_included=False).ok


def test_check_findings_table_is_diagnostics_not_cells(tmp_path, real):
    cb, panel = real
    findings = pd.DataFrame({"variable": ["it1", "pid"], "wave": [2, 3], "check": ["out_of_range", "late_entry"],
                             "severity": ["warning", "warning"], "count": [1, 2],
                             "rows": ["panel.csv:17", "panel.csv:40; panel.csv:41"],
                             "message": ["1 value(s) outside 1..5", "2 id(s) first appear at wave 3"]})
    for included in (True, False):
        report = _check(tmp_path, real, {"results/checks/findings.csv": findings}, data_included=included)
        assert report.ok, report.blocking.to_string()
        notes = report.findings[report.findings["check"] == "small cell"]
        assert list(notes["severity"]) == [NOTE]
    # the same counts in an ordinary table are small cells
    table = findings[["variable", "wave", "count"]]
    assert not _check(tmp_path, real, {"results/x/counts.csv": table}).ok
    # a diagnostics table still may not quote an identifier value
    email = panel.long["email"].dropna().iloc[3]
    leaked = findings.assign(message=["1 value(s) outside 1..5", f"late entry of {email}"])
    report = _check(tmp_path, real, {"results/checks/findings.csv": leaked})
    assert list(report.blocking["check"]) == ["identifier value"]
