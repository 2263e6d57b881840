"""Ledger records: one per job, the fixed format, the ledger table, drift and lineage.

The project here is a tiny fake one made in tmp_path: a raw file, a codebook,
and a few fake steps whose outputs are plain files, so every hash can be
checked by hand.
"""

import hashlib
import json
import multiprocessing
import platform
import sys

import git
import numpy
import pytest

import wavetrail
from wavetrail import environment, ledger
from wavetrail.cli import main
from wavetrail.errors import WavetrailError
from wavetrail.registry import register_files
from wavetrail.seeds import derive_seed
from wavetrail.stages import STEPS
from wavetrail.stages.runner import Job, job_seed, run_from_snakemake

RAW = "pid,wave,slp1\n1,1,3\n1,2,4\n2,1,2\n"


def sha(text):
    return hashlib.sha256(text.encode()).hexdigest()


def make_project(root):
    for d in ("data/raw", "config", "environment"):
        (root / d).mkdir(parents=True, exist_ok=True)
    (root / "data/raw/panel.csv").write_text(RAW)
    (root / "config/codebook.yaml").write_text("study: {id: pid, wave: wave}\nvariables: [{name: pid}]\n")
    (root / "config/config.yaml").write_text("data: [data/raw/panel.csv]\ncodebook: config/codebook.yaml\nseed: 7\n")
    register_files(root, [root / "data/raw/panel.csv"], commit=False)
    (root / "environment/requirements.lock").write_text(environment.lock_text())
    return root


def run_fake(project, step, inputs, outputs, wildcards=None, params=None):
    """A fake step: each output is the concatenation of its inputs plus its own name."""
    wildcards = wildcards or {}
    job = Job(step=step, project=project, input=inputs, output=outputs, params=params or {},
              config={"seed": 7}, wildcards=wildcards, seed=job_seed(7, step, wildcards),
              started="2026-12-01T07:00:00+00:00")
    flat_in = ledger._flatten(inputs)
    body = "".join((project / p).read_text() for p in flat_in)
    for out in ledger._flatten(outputs):
        (project / out).parent.mkdir(parents=True, exist_ok=True)
        (project / out).write_text(body + out + "\n")
    return ledger.record_job(job)


def build_chain(project):
    run_fake(project, "confirm_raw_hashes", {"data": ["data/raw/panel.csv"], "registry": "data/SHA256SUMS"},
             {"registry": "results/checks/data_registry.csv"})
    run_fake(project, "check_data", {"data": ["data/raw/panel.csv"], "codebook": "config/codebook.yaml",
                                     "registry": "results/checks/data_registry.csv"},
             {"findings": "results/checks/findings.csv"})
    run_fake(project, "score_scales", {"data": ["data/raw/panel.csv"], "codebook": "config/codebook.yaml",
                                       "findings": "results/checks/findings.csv"},
             {"scores": "results/scores/scores.csv"})
    for shard in ("1", "2"):
        run_fake(project, "grow_forest_shard", {"scores": "results/scores/scores.csv"},
                 {"shard": f"results/forest/shards/shard-{shard}.json"}, wildcards={"shard": shard},
                 params={"trees": 4, "names": ("a", "b")})
    run_fake(project, "merge_forest", {"shards": [f"results/forest/shards/shard-{s}.json" for s in "12"]},
             {"forest": "results/forest/forest.json"})
    run_fake(project, "summarise_forest", {"forest": "results/forest/forest.json",
                                           "scores": "results/scores/scores.csv"},
             {"importance": "results/forest/importance.csv",
              "figure": ["results/forest/importance.png", "results/forest/importance.svg"]})


@pytest.fixture
def project(tmp_path):
    p = make_project(tmp_path / "proj")
    build_chain(p)
    return p


def test_record_has_the_fixed_format(project):
    path = project / "results/ledger/grow_forest_shard--shard=2.json"
    rec = json.loads(path.read_text())
    assert tuple(rec) == tuple(sorted(ledger.RECORD_KEYS))  # every key, sorted (write_json)
    assert rec["schema"] == "wavetrail-ledger/1"
    assert rec["step"] == "grow_forest_shard" and rec["wildcards"] == {"shard": "2"}
    scores = (project / "results/scores/scores.csv").read_text()
    assert rec["inputs"] == [{"path": "results/scores/scores.csv", "sha256": sha(scores), "size": len(scores)}]
    shard = (project / "results/forest/shards/shard-2.json").read_text()
    assert rec["outputs"] == [{"path": "results/forest/shards/shard-2.json", "sha256": sha(shard), "size": len(shard)}]
    assert rec["params"] == {"trees": 4, "names": ["a", "b"]}
    assert rec["seed"] == derive_seed(7, "grow_forest_shard", "shard=2")
    assert rec["seed"] != json.loads((project / "results/ledger/grow_forest_shard--shard=1.json").read_text())["seed"]
    assert rec["started"] == "2026-12-01T07:00:00+00:00" and rec["finished"] >= rec["started"]
    assert rec["python"] == f"{platform.python_implementation()} {platform.python_version()}"
    assert rec["platform"] == platform.platform()
    assert rec["packages"]["numpy"] == numpy.__version__
    assert rec["packages"]["wavetrail"] == wavetrail.__version__ == rec["wavetrail"]
    assert set(rec["packages"]) == set(ledger.PACKAGES)
    assert rec["lock_sha256"] == hashlib.sha256((project / "environment/requirements.lock").read_bytes()).hexdigest()
    assert rec["git"] == {"commit": None, "dirty": None}  # no git repository: null, not a crash
    assert path.read_text().endswith("}\n")


def test_record_names_and_listing(project):
    assert ledger.record_name("fit_growth") == "fit_growth.json"
    assert ledger.record_name("s", {"b": "x/y", "a": "1"}) == "s--a=1--b=x_y.json"
    records = ledger.read_records(project)
    assert [r["_file"] for r in records] == sorted(r["_file"] for r in records)
    assert len(records) == 7
    # a half-written temporary file of a killed job is not a record
    (project / "results/ledger/.fit_growth.json.abc123.tmp").write_text('{"schema": "wavetr')
    assert len(ledger.read_records(project)) == 7


def test_hand_written_bad_records_are_refused(project):
    (project / "results/ledger/broken.json").write_text('{"schema": "wavetrail-ledger/1", ')
    with pytest.raises(WavetrailError, match="broken.json: not a readable ledger record"):
        ledger.read_records(project)
    (project / "results/ledger/broken.json").write_text('{"schema": "someone-else/3"}')
    with pytest.raises(WavetrailError, match="broken.json: not a wavetrail-ledger/1 record"):
        ledger.read_records(project)
    rec = json.loads((project / "results/ledger/merge_forest.json").read_text())
    del rec["lock_sha256"]
    (project / "results/ledger/broken.json").write_text(json.dumps(rec))
    with pytest.raises(WavetrailError, match="lacks lock_sha256"):
        ledger.read_records(project)


def test_git_commit_and_dirty_flag(tmp_path):
    p = make_project(tmp_path / "g")
    repo = git.Repo.init(p)
    run_fake(p, "confirm_raw_hashes", {"data": ["data/raw/panel.csv"]}, {"registry": "results/checks/data_registry.csv"})
    assert ledger.read_records(p)[0]["git"] == {"commit": None, "dirty": True}  # no commit yet
    repo.git.add(A=True)
    repo.git.commit("-m", "first", "--author", "t <t@example.org>")
    run_fake(p, "confirm_raw_hashes", {"data": ["data/raw/panel.csv"]}, {"registry": "results/checks/data_registry.csv"})
    rec = ledger.read_records(p)[0]
    # the build's own products (results/, the lock) do not make the tree dirty
    assert rec["git"] == {"commit": repo.head.commit.hexsha, "dirty": False}
    (p / "results/checks/extra.csv").write_text("x\n")
    (p / "environment/requirements.lock").write_text("changed\n")
    assert ledger.git_state(p) == {"commit": repo.head.commit.hexsha, "dirty": False}
    (p / "environment/requirements.lock").write_text(environment.lock_text())
    (p / "workflow").mkdir()
    (p / "workflow/new_rule.smk").write_text("# untracked code counts\n")
    assert ledger.git_state(p)["dirty"] is True
    (p / "workflow/new_rule.smk").unlink()
    # a project in a sub-folder of a repository sees that repository
    assert ledger.git_state(p / "config")["commit"] == repo.head.commit.hexsha
    (p / "config/config.yaml").write_text("seed: 8\n")
    run_fake(p, "confirm_raw_hashes", {"data": ["data/raw/panel.csv"]}, {"registry": "results/checks/data_registry.csv"})
    assert ledger.read_records(p)[0]["git"]["dirty"] is True
    table = ledger.ledger_table(p)
    assert table["revision"].tolist() == [repo.head.commit.hexsha[:10] + "+dirty"]


def test_ledger_table_lists_every_output(project):
    table = ledger.ledger_table(project)
    assert list(table.columns) == ledger.LEDGER_COLUMNS
    assert table["output"].tolist() == sorted([
        "results/checks/data_registry.csv", "results/checks/findings.csv", "results/scores/scores.csv",
        "results/forest/shards/shard-1.json", "results/forest/shards/shard-2.json",
        "results/forest/forest.json", "results/forest/importance.csv", "results/forest/importance.png",
        "results/forest/importance.svg"])
    row = table.set_index("output").loc["results/forest/shards/shard-1.json"]
    assert row["step"] == "grow_forest_shard" and row["wildcards"] == "shard=1"
    assert row["seed"] == derive_seed(7, "grow_forest_shard", "shard=1")
    assert row["inputs"] == "results/scores/scores.csv" and row["revision"] == "no git"
    assert set(table["environment"]) == {"locked"}


def test_a_job_from_another_environment_shows_in_the_table(project):
    rec_path = project / "results/ledger/merge_forest.json"
    rec = json.loads(rec_path.read_text())
    rec["lock_sha256"] = "ab" * 32  # as written by a build in another environment
    rec_path.write_text(json.dumps(rec))
    table = ledger.ledger_table(project).set_index("output")
    assert table.loc["results/forest/forest.json", "environment"] == "other abababababab"
    assert table.loc["results/scores/scores.csv", "environment"] == "locked"
    (project / "environment/requirements.lock").unlink()
    assert set(ledger.ledger_table(project)["environment"]) == {"unlocked"}


def test_drift_is_silent_on_a_fresh_chain_and_names_edits(project):
    assert ledger.drift_table(project).empty
    # hand-edit one output: it is changed, and everything that read it is stale
    (project / "results/scores/scores.csv").write_text("edited by hand\n")
    drift = ledger.drift_table(project)
    assert list(drift.columns) == ledger.DRIFT_COLUMNS
    got = sorted(zip(drift["file"], drift["problem"]))
    assert got == [("results/forest/importance.csv", "stale"), ("results/forest/importance.png", "stale"),
                   ("results/forest/importance.svg", "stale"),
                   ("results/forest/shards/shard-1.json", "stale"), ("results/forest/shards/shard-2.json", "stale"),
                   ("results/scores/scores.csv", "changed")]
    changed = drift[drift["problem"] == "changed"].iloc[0]
    assert changed["current_sha256"] == sha("edited by hand\n")
    assert "results/scores/scores.csv" in drift[drift["problem"] == "stale"].iloc[0]["detail"]


def test_drift_names_missing_outputs_and_changed_raw_data(project):
    (project / "results/forest/forest.json").unlink()
    (project / "data/raw/panel.csv").write_text(RAW + "3,1,1\n")
    drift = ledger.drift_table(project)
    got = set(zip(drift["file"], drift["problem"]))
    assert ("results/forest/forest.json", "missing") in got
    assert ("results/checks/data_registry.csv", "stale") in got  # confirm_raw_hashes read the raw file
    assert ("results/checks/findings.csv", "stale") in got
    assert ("results/scores/scores.csv", "stale") in got
    # summarise_forest read the missing forest: its three outputs are stale too
    assert {f for f, prob in got if prob == "stale" and f.startswith("results/forest/importance")} == {
        "results/forest/importance.csv", "results/forest/importance.png", "results/forest/importance.svg"}
    assert len(drift) == 7
    assert "(gone)" in drift.set_index("file").loc["results/forest/importance.csv", "detail"]


def test_lineage_walks_from_a_figure_to_registered_raw_data(project):
    lin = ledger.lineage(project, "results/forest/importance.png")
    by_file = dict(zip(lin["file"], lin["origin"]))
    assert by_file["results/forest/importance.png"] == "output"
    assert by_file["data/raw/panel.csv"] == "registered"
    assert by_file["config/codebook.yaml"] == "source" and by_file["data/SHA256SUMS"] == "source"
    assert set(by_file.values()) == {"output", "registered", "source"}
    assert set(lin["step"]) >= {"summarise_forest", "merge_forest", "grow_forest_shard", "score_scales",
                                "check_data", "confirm_raw_hashes"}
    assert ledger.untraced_inputs(project).empty
    # a raw file with other bytes than registered breaks the chain
    (project / "data/SHA256SUMS").write_text("0" * 64 + "  raw/panel.csv\n")
    lin = ledger.lineage(project, "results/forest/importance.png")
    assert dict(zip(lin["file"], lin["origin"]))["data/raw/panel.csv"] == "untraced"
    assert ledger.untraced_inputs(project)["input"].unique().tolist() == ["data/raw/panel.csv"]


def _write_shard_record(args):
    root, shard = args
    from pathlib import Path

    project = Path(root)
    job = Job(step="grow_forest_shard", project=project, input={"scores": "results/scores/scores.csv"},
              output={"shard": f"results/forest/shards/shard-{shard % 2 + 1}.json"}, config={"seed": 7},
              wildcards={"shard": str(shard % 3)}, seed=shard)
    ledger.record_job(job)
    return shard


def test_parallel_jobs_leave_only_whole_records(project):
    # 24 jobs in 4 processes, several writing the same record file at once
    ctx = multiprocessing.get_context("fork" if sys.platform != "win32" else "spawn")
    with ctx.Pool(4) as pool:
        done = pool.map(_write_shard_record, [(str(project), i) for i in range(24)])
    assert sorted(done) == list(range(24))
    records = ledger.read_records(project)  # raises on any torn record
    shard_recs = [r for r in records if r["step"] == "grow_forest_shard"]
    assert sorted(r["wildcards"]["shard"] for r in shard_recs) == ["0", "1", "2"]
    assert not [p for p in (project / "results/ledger").iterdir() if p.name.startswith(".")]


class _Names(dict):
    def __getattr__(self, name):
        try:
            return self[name]
        except KeyError:
            raise AttributeError(name) from None


class _FakeSnakemake:
    def __init__(self, rule, input, output, params, wildcards, log, config):
        self.rule, self.config = rule, config
        self.input, self.output = _Names(input), _Names(output)
        self.params, self.wildcards = _Names(params), _Names(wildcards)
        self.log = log


def _upper_step(job):
    text = job.path(job.input["scores"]).read_text().upper()
    job.path(job.output["upper"]).write_text(text)


def test_runner_records_every_job_it_runs(project, monkeypatch):
    monkeypatch.chdir(project)
    monkeypatch.setitem(STEPS, "upper_scores", "test_ledger:_upper_step")
    smk = _FakeSnakemake("upper_scores", {"scores": "results/scores/scores.csv"},
                         {"upper": "results/scores/upper.csv"}, {"fingerprint": "x"}, {"k": "3"},
                         ["logs/scores/upper_scores--k=3.log"], {"seed": 7})
    run_from_snakemake(smk)
    rec = json.loads((project / "results/ledger/upper_scores--k=3.json").read_text())
    assert rec["seed"] == derive_seed(7, "upper_scores", "k=3")
    assert rec["outputs"][0]["sha256"] == sha((project / "results/scores/upper.csv").read_text())
    assert rec["params"] == {"fingerprint": "x"}
    # a failing step writes no record
    monkeypatch.setitem(STEPS, "broken_step", "test_ledger:_no_such_function")
    smk.rule = "broken_step"
    with pytest.raises(AttributeError):
        run_from_snakemake(smk)
    assert not (project / "results/ledger/broken_step--k=3.json").exists()


def test_cli_ledger_and_drift(project, capsys):
    assert main(["ledger", str(project), "--json"]) == 0
    rows = json.loads(capsys.readouterr().out)
    assert len(rows) == 9 and {r["step"] for r in rows} >= {"merge_forest"}
    assert main(["ledger", str(project), "--drift"]) == 0
    assert "no drift" in capsys.readouterr().out
    (project / "results/forest/importance.csv").write_text("x\n")
    assert main(["ledger", str(project), "--drift", "--json"]) == 1
    rows = json.loads(capsys.readouterr().out)
    assert [(r["file"], r["problem"]) for r in rows] == [("results/forest/importance.csv", "changed")]
