"""verify --rebuild on a small project whose Snakefile really recomputes its results."""

from __future__ import annotations

import json

import pandas as pd
import pytest

from test_archive_helpers import make_project
from wavetrail import ledger
from wavetrail._io import sha256_file, write_json, write_table
from wavetrail.archive import pack_project, verify_archive

pytestmark = pytest.mark.slow


@pytest.fixture(scope="module")
def project(tmp_path_factory):
    return make_project(tmp_path_factory.mktemp("rebuild") / "proj", n=120, email=False, workflow=True)


def _statuses(report) -> dict:
    rows = report.table[report.table["check"] == "rebuild"]
    return dict(zip(rows["target"], rows["status"]))


def test_include_rebuild_is_identical(project, tmp_path):
    archive = pack_project(project, raw="include", output=tmp_path / "inc.zip")
    report = verify_archive(archive, rebuild=True, json_path=tmp_path / "report.json")
    assert report.ok, report.summary
    statuses = _statuses(report)
    assert statuses.pop("workflow") == "ok"
    assert set(statuses) == {"environment/requirements.lock", "results/checks/data_registry.csv",
                             "results/checks/descriptives.csv", "results/checks/panel.parquet",
                             "results/growth/fit.csv",
                             "results/growth/summary.json", "results/scores/scores.csv"}
    assert set(statuses.values()) == {"identical"}
    assert "isolated environment" in report.summary
    assert json.loads((tmp_path / "report.json").read_text())["ok"] is True


def _reforge(root, factor: float) -> None:
    """Change the archived slope and rewrite its ledger hash, as a careless or dishonest author might."""
    fit = root / "results/growth/fit.csv"
    table = pd.read_csv(fit)
    table["slope"] = table["slope"] * factor
    write_table(fit, table)
    rec_path = root / ledger.LEDGER_DIR / ledger.record_name("describe", {"outcome": "sd"})
    rec = json.loads(rec_path.read_text())
    for e in rec["outputs"]:
        if e["path"] == "results/growth/fit.csv":
            e["sha256"], e["size"] = sha256_file(fit), fit.stat().st_size
    write_json(rec_path, rec)


def test_rebuild_reports_tolerance_and_differences(tmp_path):
    root = make_project(tmp_path / "proj", n=100, email=False, workflow=True)
    _reforge(root, 1 + 1e-9)
    near = verify_archive(pack_project(root, raw="include", output=tmp_path / "near.zip"), rebuild=True)
    assert near.ok, near.summary
    assert _statuses(near)["results/growth/fit.csv"] == "within tolerance"
    _reforge(root, 1.01)
    far = verify_archive(pack_project(root, raw="include", output=tmp_path / "far.zip"), rebuild=True)
    assert not far.ok
    assert _statuses(far)["results/growth/fit.csv"] == "different"
    detail = far.table.loc[far.table["target"] == "results/growth/fit.csv", "detail"].iloc[-1]
    assert detail.startswith("slope: row 1") and "relative difference" in detail
    assert _statuses(far)["results/scores/scores.csv"] == "identical"


def test_stand_in_archive_rebuilds_on_stand_in_rows(project, tmp_path):
    archive = pack_project(project, raw="stand-in", output=tmp_path / "si.tar.gz")
    report = verify_archive(archive, rebuild=True)
    assert report.ok, report.summary
    statuses = _statuses(report)
    assert statuses.pop("workflow") == "ok"
    assert "STAND-IN" in report.table.loc[report.table["target"] == "workflow", "detail"].iloc[0]
    assert set(statuses.values()) == {"rebuilt on stand-in"}
    assert "results/growth/fit.csv" in statuses
    assert statuses["results/checks/panel.parquet"] == "rebuilt on stand-in"  # regenerated, not compared
