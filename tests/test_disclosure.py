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
    report = _check(tmp_path, real, {"results/write-up/report.html": html})
    hit = report.blocking.iloc[0]
    assert hit["check"] == "identifier value" and hit["row"] == 3


def test_cell_of_two_blocks_and_zero_does_not(tmp_path, real):
    table = pd.DataFrame({"group": ["a", "b", "c"], "n": [40, 2, 0], "mean": [1.0, 2.0, None]})
    report = _check(tmp_path, real, {"results/checks/counts.csv": table})
    small = report.blocking[report.blocking["check"] == "small cell"]
    assert len(small) == 1
    assert small.iloc[0]["row"] == 2 and small.iloc[0]["column"] == "n"
    assert "count 2 is below 5 (min_cell;" in small.iloc[0]["message"]
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
        pack_project(root, raw="exclude")
    text = str(err.value)
    assert "results/checks/groups.csv, row 2, column 'n': count 2" in text and "--allow-disclosure" in text
    out = pack_project(root, raw="exclude", allow_disclosure=True, output=tmp_path / "a.zip")
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
        pack_project(root, raw="include")
    # the same project packs without the raw file
    assert pack_project(root, raw="exclude", output=tmp_path / "x.zip").is_file()


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


# ----------------------------------------------------------------------------- every packed file


def _commit(root, files: dict) -> None:
    import git

    for rel, content in files.items():
        path = root / rel
        path.parent.mkdir(parents=True, exist_ok=True)
        if isinstance(content, pd.DataFrame):
            write_table(path, content)
        else:
            path.write_text(content, encoding="utf-8")
    repo = git.Repo(root)
    repo.git.add("-A")
    with repo.git.custom_environment(GIT_AUTHOR_NAME="t", GIT_AUTHOR_EMAIL="t@localhost",
                                     GIT_COMMITTER_NAME="t", GIT_COMMITTER_EMAIL="t@localhost"):
        repo.git.commit("-q", "-m", "add files", "--no-gpg-sign")


def _refused(root, mode, tmp_path, capsys, *expected):
    """pack refuses through the command line: exit 1, every expected text, no traceback."""
    from wavetrail.cli import main

    code = main(["pack", str(root), "--raw", mode, "-o", str(tmp_path / f"{mode}.zip")])
    out = capsys.readouterr()
    text = " ".join((out.out + out.err).split())
    assert code == 1 and "Traceback" not in text
    for e in expected:
        assert e in text, (e, text)
    assert not (tmp_path / f"{mode}.zip").exists()
    return text


@pytest.mark.parametrize("mode", ["exclude", "stand-in"])
def test_committed_raw_copy_outside_results_is_refused(tmp_path, capsys, mode):
    root = make_project(tmp_path / "proj", n=120, email=True)
    raw = pd.read_csv(root / "data/raw/panel.csv")
    _commit(root, {"data/interim/cleaned.csv": raw})
    _refused(root, mode, tmp_path, capsys, "data/interim/cleaned.csv",
             "holds a value of an identifier variable", "column 'pid' holds",
             "real person ids", "git rm --cached")


@pytest.mark.parametrize("mode", ["exclude", "stand-in"])
def test_near_copy_of_raw_rows_without_ids_is_refused(tmp_path, capsys, mode):
    root = make_project(tmp_path / "proj", n=120, email=True)
    raw = pd.read_csv(root / "data/raw/panel.csv").drop(columns=["pid", "email"])
    near = raw.head(40).copy()
    near["it2"] = near["it2"].map(lambda v: 1 if v != 1 else 2)  # one cell of every row changed
    _commit(root, {"docs/appendix-rows.csv": near})
    _refused(root, mode, tmp_path, capsys, "docs/appendix-rows.csv, row 1:", "differ in one cell",
             "aggregate or drop these rows")


def test_identifier_in_other_letter_case_is_refused(tmp_path, capsys):
    root = make_project(tmp_path / "proj", n=120, email=True)
    email = pd.read_csv(root / "data/raw/panel.csv")["email"].iloc[5]
    _commit(root, {"docs/notes.md": f"# Notes\n\nfollow up {email.upper()} after wave 2\n"})
    _refused(root, "exclude", tmp_path, capsys, "docs/notes.md, line 3: holds a value of an identifier")


@pytest.mark.parametrize("mode", ["exclude", "stand-in"])
def test_packed_small_cells_and_missing_counts_are_refused(tmp_path, capsys, mode):
    desc = ("variable,wave,n,missing,levels\nstart,1,300,0,1:138; 2:160; 3:2\n"
            "screen,1,299,1,\n")
    root = make_project(tmp_path / "proj", n=120, email=False,
                        extra_outputs={"results/checks/levels.csv": desc})
    text = _refused(root, mode, tmp_path, capsys, "results/checks/levels.csv, row 1, column 'levels': packed count 3:2",
                    "results/checks/levels.csv, row 2, column 'missing': count 1 is below 5",
                    "report.min_cell in config/config.yaml")
    assert "disclosure check:" in text and "small cells are counts below 5" in text
    # the threshold can be set for packing alone, and the message says so
    from wavetrail.cli import main

    assert main(["pack", str(root), "--raw", mode, "--min-cell", "1", "-o", str(tmp_path / "ok.zip")]) == 0
    assert "counts below 1 (pack --min-cell)" in capsys.readouterr().out


def test_packed_counts_parser():
    from wavetrail.archive.disclosure import packed_counts

    assert packed_counts("1:138; 2:160; 3:2") == [("1", 138), ("2", 160), ("3", 2)]
    assert packed_counts("girl: 40, boy: 3") == [("girl", 40), ("boy", 3)]
    assert packed_counts("12:30") is None  # a time, not a packed cell
    assert packed_counts("see note 3") is None


def test_raw_coded_copy_is_matched_with_missing_codes(tmp_path, real):
    cb, panel = real
    raw = make_panel(150, seed=2)  # the raw coding: -99 / -98 where the clean data hold NaN
    rows = raw[["wave", "it1", "it2", "it3", "it4", "it5", "it6"]].head(60)
    report = _check(tmp_path, real, {"docs/rows.csv": rows}, data_included=False)
    hit = report.blocking[report.blocking["check"] == "raw row"]
    assert len(hit) == 1 and hit.iloc[0]["file"] == "docs/rows.csv"
