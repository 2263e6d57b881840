"""Failing checks stop `wavetrail build` before scoring and leave the findings to read."""

from __future__ import annotations

import csv
import io
import subprocess
import sys
from pathlib import Path

import pandas as pd
import pytest

from wavetrail.project import check_project, make_demo

FINDINGS = "results/checks/findings.csv"


def run(args, cwd):
    """`wavetrail ARGS` in a fresh interpreter, as a user's shell runs it."""
    return subprocess.run([sys.executable, "-m", "wavetrail.cli", *args], capture_output=True, text=True, cwd=cwd)


def _inject(raw: Path, line: int, column: str, value: str) -> None:
    """Set one cell of a CSV file (``line`` counts the header as line 1)."""
    rows = list(csv.reader(io.StringIO(raw.read_text(encoding="utf-8"))))
    rows[line - 1][rows[0].index(column)] = value
    buf = io.StringIO()
    csv.writer(buf, lineterminator="\n").writerows(rows)
    raw.write_text(buf.getvalue(), encoding="utf-8")


def test_demo_checks_list_its_straight_lining_warnings_and_no_errors(tmp_path):
    root = make_demo(tmp_path / "demo", trees=4)
    f = check_project(root)
    assert not (f["severity"] == "error").any(), f[f["severity"] == "error"]
    warnings = f[f["severity"] == "warning"]
    # the demo plants straight-liners in the sleep scale and declares its missing codes
    assert set(warnings["check"]) == {"straight_lining"}
    assert set(warnings["variable"]) == {"sleep_difficulty"}
    assert sorted(warnings["wave"].astype(int)) == [1, 2, 3, 4, 5]
    assert (warnings["count"] >= 1).all()
    assert "missing_code" in set(f.loc[f["severity"] == "info", "check"])
    assert warnings["rows"].str.fullmatch(r"panel\.csv:\d+(; panel\.csv:\d+)*").all()


@pytest.mark.slow
def test_out_of_range_value_stops_build_before_scoring_and_keeps_findings(tmp_path, bare_git):
    root = make_demo(tmp_path / "demo", trees=4)
    raw = root / "data" / "raw" / "panel.csv"
    _inject(raw, 5, "slp3", "7")  # slp items are 1-5; 7 is not a missing-code look-alike
    added = run(["data", "register", "data/raw/panel.csv"], cwd=root)
    assert added.returncode == 0, added.stdout + added.stderr

    proc = run(["build", "--cores", "1"], cwd=root)
    out = proc.stdout + proc.stderr
    assert proc.returncode == 1, out
    assert "Traceback" not in out
    assert FINDINGS in out
    assert "out_of_range in slp3" in out and "stopped before scoring" in out
    assert not (root / "results" / "scores" / "scores.csv").exists()
    findings = pd.read_csv(root / FINDINGS, keep_default_na=False)  # kept for the user to read
    hit = findings[(findings["check"] == "out_of_range") & (findings["variable"] == "slp3")]
    assert len(hit) == 1 and hit["count"].iloc[0] == 1 and hit["rows"].iloc[0] == "panel.csv:5"
    assert hit["severity"].iloc[0] == "error"

    # the same refusal on the next build (check_data is up to date; scoring still refuses)
    again = run(["build", "--cores", "1"], cwd=root)
    assert again.returncode == 1 and FINDINGS in again.stdout + again.stderr
    assert not (root / "results" / "scores" / "scores.csv").exists()


def test_demo_findings_table_passes_the_pack_time_disclosure_check(tmp_path):
    from wavetrail._io import write_table
    from wavetrail.archive.disclosure import check_outputs
    from wavetrail.codebook import load_codebook
    from wavetrail.config import load_config
    from wavetrail.panel import load_panel

    root = make_demo(tmp_path / "demo", trees=4)
    findings = check_project(root)
    path = root / FINDINGS
    write_table(path, findings)
    config = load_config(root)
    codebook = load_codebook(root / config["codebook"])
    panel = load_panel([root / p for p in config["data"]], codebook)
    # the findings locate records by file row, never by person id
    assert not findings["message"].str.contains(rf"\b{codebook.study.id}s?\b[ \t:=#]*\d", regex=True).any()
    for included in (True, False):
        report = check_outputs({FINDINGS: path}, codebook, panel.long, data_included=included)
        assert report.blocking.empty, report.blocking.to_dict("records")
