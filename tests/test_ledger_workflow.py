"""The audit-trail rules under real Snakemake: records written by the runner, registry refusal.

A minimal workflow made in tmp_path includes the shipped ``rules/provenance.smk``
and ``rules/scripts/run_step.py`` unchanged, so the rule wiring, the runner hook
and the steps are exercised exactly as in a project.
"""

import hashlib
import json
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

from wavetrail import environment, ledger
from wavetrail.registry import register_files

RULES = Path(__file__).resolve().parents[1] / "rules"

SNAKEFILE = """\
configfile: "config/config.yaml"


include: "rules/common.smk"
include: "rules/provenance.smk"


rule all:
    default_target: True
    input:
        "results/checks/data_registry.csv",
        "environment/requirements.lock",
"""


def snakemake(project, *args):
    return subprocess.run([sys.executable, "-m", "snakemake", "--cores", "1", "--rerun-incomplete", *args],
                          cwd=project, capture_output=True, text=True, timeout=300)


@pytest.fixture
def mini(tmp_path):
    p = tmp_path / "mini"
    (p / "workflow/rules/scripts").mkdir(parents=True)
    (p / "data/raw").mkdir(parents=True)
    (p / "config").mkdir()
    shutil.copy(RULES / "common.smk", p / "workflow/rules/common.smk")  # the shipped fingerprint helper
    shutil.copy(RULES / "provenance.smk", p / "workflow/rules/provenance.smk")
    shutil.copy(RULES / "scripts/run_step.py", p / "workflow/rules/scripts/run_step.py")
    (p / "workflow/Snakefile").write_text(SNAKEFILE)
    (p / "config/config.yaml").write_text("data: [data/raw/w1.csv, data/raw/w2.csv]\nseed: 11\n"
                                         "resources: {runtime: 10, mem_mb: 200}\n")
    (p / "data/raw/w1.csv").write_text("pid,slp1\n1,3\n2,4\n")
    (p / "data/raw/w2.csv").write_text("pid,slp1\n1,2\n2,5\n")
    register_files(p, [p / "data/raw/w1.csv", p / "data/raw/w2.csv"], commit=False)
    return p


@pytest.mark.slow
def test_rules_write_records_and_refuse_changed_data(mini):
    done = snakemake(mini)
    assert done.returncode == 0, done.stderr[-3000:]
    records = {r["step"]: r for r in ledger.read_records(mini)}
    assert set(records) == {"confirm_raw_hashes", "lock_environment"}
    lock = (mini / "environment/requirements.lock").read_bytes()
    assert lock.decode() == environment.lock_text()
    assert records["lock_environment"]["params"] == {"fingerprint": hashlib.sha256(lock).hexdigest()}
    assert records["confirm_raw_hashes"]["lock_sha256"] == hashlib.sha256(lock).hexdigest()
    assert [i["path"] for i in records["confirm_raw_hashes"]["inputs"]] == [
        "data/SHA256SUMS", "data/raw/w1.csv", "data/raw/w2.csv"]
    assert records["confirm_raw_hashes"]["outputs"][0]["path"] == "results/checks/data_registry.csv"
    assert ledger.drift_table(mini).empty
    table = (mini / "results/checks/data_registry.csv").read_text().splitlines()
    assert table[0] == "file,sha256,size,state" and len(table) == 3

    # one changed byte: the next run stops with the registry message, naming the fix
    raw = (mini / "data/raw/w2.csv").read_bytes()
    (mini / "data/raw/w2.csv").write_bytes(raw[:-2] + b"6\n")
    assert set(ledger.drift_table(mini)["problem"]) == {"stale"}
    failed = snakemake(mini)
    assert failed.returncode != 0
    assert "data/raw/w2.csv: bytes differ from the registered hash" in failed.stderr
    assert f"expected sha256 {hashlib.sha256(raw).hexdigest()}" in failed.stderr
    assert "wavetrail data register data/raw/w2.csv" in failed.stderr
    # Snakemake removed the refused job's old output; the old record stays readable and
    # the ledger says the table is missing
    assert not (mini / "results/checks/data_registry.csv").exists()
    drift = ledger.drift_table(mini)
    assert ("results/checks/data_registry.csv", "missing") in set(zip(drift["file"], drift["problem"]))

    register_files(mini, [mini / "data/raw/w2.csv"], commit=False)
    again = snakemake(mini)
    assert again.returncode == 0, again.stderr[-3000:]
    assert ledger.drift_table(mini).empty
    rec = json.loads((mini / "results/ledger/confirm_raw_hashes.json").read_text())
    assert {i["path"]: i["sha256"] for i in rec["inputs"]}["data/raw/w2.csv"] == hashlib.sha256(
        (mini / "data/raw/w2.csv").read_bytes()).hexdigest()
