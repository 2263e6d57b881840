"""End to end: the demo project built from clean copies is byte-identical, on 1 or 2 cores,
and its audit trail holds (registry refusal, drift, kill safety, lineage to raw data).

One small demo (few trees, two forest shards, no invariance sequence) is made once per
session; every test works on its own copy of it, and the reference builds are shared.
While a stage outside the audit trail cannot run yet, the whole-demo comparison is
skipped with the failing rule named, and the other tests run on the first stages
(data checks and scale scores) instead.
"""

import hashlib
import json
import os
import re
import shutil
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest
import yaml

from wavetrail import ledger
from wavetrail.cli import main
from wavetrail.errors import WavetrailError

pytestmark = pytest.mark.slow

#: forest size of the test demo (the shipped demo grows more; results must not depend on it)
TREES = 12
SHARDS = 2
#: record keys that may differ between two builds of the same project (wall-clock times)
TIME_KEYS = ("started", "finished")


def _demo_api():
    project = pytest.importorskip("wavetrail.project")
    build = pytest.importorskip("wavetrail.build")
    if not hasattr(project, "make_demo") or not hasattr(build, "build_project"):
        pytest.skip("demo builder not available yet")
    return project.make_demo, build.build_project


@pytest.fixture(scope="session")
def demo_source(tmp_path_factory):
    """A clean, committed, never-built demo project with a small forest in two shards."""
    make_demo, _ = _demo_api()
    root = make_demo(tmp_path_factory.mktemp("demo") / "source", trees=TREES)
    cfg = root / "config/config.yaml"
    text = cfg.read_text()
    text, n = re.subn(r"(?m)^(\s+shards:\s*)\d+", rf"\g<1>{SHARDS}", text)
    assert n == 1, "the demo config has no forest.shards key"
    # skip the invariance sequence (the slowest step; its own tests cover it) to keep these runs short
    text, n = re.subn(r"(?m)^(invariance:\s*\n\s+scales:\s*).*$", r"\g<1>[]", text)
    assert n == 1, "the demo config has no invariance.scales key"
    if text == cfg.read_text():
        return root
    cfg.write_text(text)
    if (root / ".git").is_dir():
        env = dict(os.environ, GIT_AUTHOR_NAME="t", GIT_AUTHOR_EMAIL="t@example.org",
                   GIT_COMMITTER_NAME="t", GIT_COMMITTER_EMAIL="t@example.org")
        subprocess.run(["git", "commit", "-qam", "test: smaller demo"], cwd=root, env=env, check=True)
    return root


#: the rules of the audit trail itself: a failure there is never a reason to skip
AUDIT_RULES = ("confirm_raw_hashes", "lock_environment")
#: outputs of the first stages (data checks, scale scores), for the short determinism run
EARLY_TARGETS = ["results/checks/findings.csv", "results/checks/descriptives.csv", "results/checks/attrition.csv",
                 "results/scores/scores.csv", "results/scores/reliability.csv", "environment/requirements.lock"]


def _build(root, cores, extra=()):
    """build_project, skipping (with the reason) while a stage outside the audit trail cannot run yet."""
    from wavetrail.errors import BuildError

    _, build_project = _demo_api()
    try:
        return build_project(root, cores=cores, extra=list(extra))
    except BuildError as err:
        failed = re.search(r"rule (\w+) failed", str(err))
        if failed and failed.group(1) not in AUDIT_RULES:
            pytest.skip(f"the demo workflow does not build yet: {str(err).splitlines()[0]}")
        raise


def _copy(source, dest):
    shutil.copytree(source, dest, symlinks=True)
    return dest


@pytest.fixture(scope="session")
def built_1core(demo_source, tmp_path_factory):
    root = _copy(demo_source, tmp_path_factory.mktemp("b1") / "demo")
    t0 = time.perf_counter()
    _build(root, cores=1)
    print(f"\ndemo build, 1 core: {time.perf_counter() - t0:.1f} s")
    return root


@pytest.fixture(scope="session")
def built_2core(demo_source, tmp_path_factory):
    root = _copy(demo_source, tmp_path_factory.mktemp("b2") / "demo")
    t0 = time.perf_counter()
    _build(root, cores=2)
    print(f"\ndemo build, 2 cores: {time.perf_counter() - t0:.1f} s")
    return root


def result_files(root):
    """Every result file except the ledger records and hidden temporary files, by relative path."""
    out = {}
    for p in sorted((root / "results").rglob("*")):
        rel = p.relative_to(root).as_posix()
        if p.is_file() and not p.name.startswith(".") and not rel.startswith("results/ledger/"):
            out[rel] = p.read_bytes()
    lock = root / "environment/requirements.lock"
    if lock.is_file():
        out["environment/requirements.lock"] = lock.read_bytes()
    return out


def timeless_records(root):
    out = {}
    for rec in ledger.read_records(root):
        out[rec.pop("_file")] = {k: v for k, v in rec.items() if k not in TIME_KEYS}
    return out


def _first_raw_file(root):
    config = yaml.safe_load((root / "config/config.yaml").read_text())
    data = config["data"]
    return (data if isinstance(data, list) else [data])[0]


def _change_one_byte(path, codebook):
    """Raise one item response by one (e.g. 3 -> 4): one byte, and the data stay valid."""
    items = [v["name"] for v in yaml.safe_load(codebook.read_text())["variables"] if v.get("scale")]
    raw = path.read_bytes()
    lines = raw.split(b"\n")
    header = lines[0].decode().split(",")
    col = next(i for i, name in enumerate(header) if any(name.strip('"').startswith(it) for it in items))
    for n, line in enumerate(lines[1:], start=1):
        fields = line.split(b",")
        if b'"' not in line and len(fields) == len(header) and fields[col] in (b"1", b"2", b"3", b"4"):
            fields[col] = str(int(fields[col]) + 1).encode()
            lines[n] = b",".join(fields)
            break
    else:
        pytest.fail(f"no item response to change in {path}")
    changed = b"\n".join(lines)
    assert len(changed) == len(raw) and sum(a != b for a, b in zip(raw, changed)) == 1
    path.write_bytes(changed)


def test_first_stages_are_byte_identical_on_1_and_2_cores(demo_source, tmp_path):
    """The data checks and scale scores alone: short, and independent of the later stages."""
    outputs = {}
    for cores in (1, 2):
        root = _copy(demo_source, tmp_path / f"early{cores}")
        _build(root, cores, extra=EARLY_TARGETS)
        outputs[cores] = result_files(root)
        assert ledger.drift_table(root).empty
        assert ledger.untraced_inputs(root).empty
    assert set(EARLY_TARGETS) <= set(outputs[1])
    assert sorted(outputs[1]) == sorted(outputs[2])
    assert [k for k in outputs[1] if outputs[1][k] != outputs[2][k]] == []


def test_two_clean_builds_on_1_and_2_cores_are_byte_identical(built_1core, built_2core):
    a, b = result_files(built_1core), result_files(built_2core)
    assert sorted(a) == sorted(b)
    tables = [k for k in a if k.endswith(".csv")]
    figures = [k for k in a if k.endswith((".png", ".svg"))]
    assert len(tables) >= 12 and len(figures) >= 4, (tables, figures)  # the demo really built
    assert any(k.startswith("results/forest/shards/") for k in a) or "results/forest/forest.json" in a
    differing = [k for k in a if a[k] != b[k]]
    assert differing == []
    # the records agree too, except for their wall-clock times
    ra, rb = timeless_records(built_1core), timeless_records(built_2core)
    assert sorted(ra) == sorted(rb)
    assert [k for k in ra if ra[k] != rb[k]] == []
    assert {f"grow_forest_shard--shard={i}.json" for i in range(1, SHARDS + 1)} <= {Path(k).name for k in ra}


def test_drift_is_silent_on_a_fresh_build_and_names_a_hand_edited_file(reference_build, tmp_path, capsys):
    built_1core, targets = reference_build
    assert ledger.drift_table(built_1core).empty
    assert main(["ledger", str(built_1core), "--drift"]) == 0
    assert "no drift" in capsys.readouterr().out
    copy = _copy(built_1core, tmp_path / "edited")
    edited = "results/checks/findings.csv" if targets else "results/growth/fit.csv"
    path = copy / edited
    path.write_text(path.read_text().replace(",", ";", 1))
    drift = ledger.drift_table(copy)
    assert set(drift.loc[drift["problem"] == "changed", "file"]) == {edited}
    assert (drift["problem"] == "stale").any()  # later steps read it
    assert "stale" not in set(drift.loc[drift["file"] == edited, "problem"])
    assert main(["ledger", str(copy), "--drift", "--json"]) == 1
    assert edited in {row["file"] for row in json.loads(capsys.readouterr().out)}


def test_every_figure_walks_back_to_registered_raw_data(reference_build):
    built_1core, targets = reference_build
    records = ledger.read_records(built_1core)
    figures = sorted({o["path"] for r in records for o in r["outputs"] if o["path"].endswith((".png", ".svg"))})
    assert figures or targets  # the whole demo draws figures
    analysis = sorted({o["path"] for r in records if r["step"] not in AUDIT_RULES for o in r["outputs"]})
    raw = _first_raw_file(built_1core)
    for fig in figures + analysis:
        lin = ledger.lineage(built_1core, fig, records)
        origins = dict(zip(lin["file"], lin["origin"]))
        sources = {f for f, o in origins.items() if o != "output"}
        assert raw in sources and origins[raw] == "registered", fig
        assert set(origins.values()) <= {"output", "registered", "source"}, (fig, origins)
        assert all(f.startswith(ledger.SOURCE_PREFIXES) for f, o in origins.items() if o == "source")
    # every input of every record is another record's output, registered raw data, or a source
    assert ledger.untraced_inputs(built_1core, records).empty
    # and the walk reaches the raw data through the registry check
    report = [o["path"] for r in records for o in r["outputs"] if o["path"].endswith(".html")]
    if report:
        steps = set(ledger.lineage(built_1core, report[0], records)["step"])
        assert {"confirm_raw_hashes", "check_data", "fit_growth"} <= steps


@pytest.fixture(scope="session")
def reference_build(request, demo_source, tmp_path_factory):
    """The 1-core build and the targets it was built for: the whole demo, or (while a later
    stage cannot run yet) only its first stages."""
    try:
        return request.getfixturevalue("built_1core"), []
    except pytest.skip.Exception:
        root = _copy(demo_source, tmp_path_factory.mktemp("early-ref") / "demo")
        _build(root, 1, extra=EARLY_TARGETS)
        return root, EARLY_TARGETS


def test_changed_raw_byte_stops_the_build_until_registered(reference_build, tmp_path, monkeypatch):
    _, build_project = _demo_api()
    built_1core, _ = reference_build
    copy = _copy(built_1core, tmp_path / "changed")
    raw = _first_raw_file(copy)
    _change_one_byte(copy / raw, copy / yaml.safe_load((copy / "config/config.yaml").read_text())["codebook"])
    with pytest.raises(WavetrailError) as info:
        build_project(copy, cores=2)
    message = str(info.value)
    assert "confirm_raw_hashes" in message
    assert "bytes differ from the registered hash" in message
    assert f"wavetrail data register {raw}" in message
    monkeypatch.chdir(copy)
    assert main(["data", "register", raw]) == 0
    # now the registry check passes (only it is rebuilt here, to keep the test short) ...
    build_project(copy, cores=2, extra=["results/checks/data_registry.csv"])
    # ... and the ledger says exactly what the new bytes make out of date: nothing is
    # changed or missing, everything computed from the raw file is stale: the check step's
    # outputs, the stored panel among them (the later steps read the stored panel, which the
    # next build rewrites first, so they are behind it rather than behind the raw file)
    drift = ledger.drift_table(copy)
    assert set(drift["problem"]) == {"stale"}
    assert "results/checks/data_registry.csv" not in set(drift["file"])
    assert {"results/checks/findings.csv", "results/checks/panel.parquet"} <= set(drift["file"])
    scores = {r["step"]: r for r in ledger.read_records(copy)}["score_scales"]
    assert "results/checks/panel.parquet" in {i["path"] for i in scores["inputs"]}
    assert raw not in {i["path"] for i in scores["inputs"]}
    rec = {r["step"]: r for r in ledger.read_records(copy)}["confirm_raw_hashes"]
    assert {i["path"]: i["sha256"] for i in rec["inputs"]}[raw] != {
        i["path"]: i["sha256"] for i in {r["step"]: r for r in ledger.read_records(built_1core)}["confirm_raw_hashes"]["inputs"]
    }[raw]


def test_a_killed_build_leaves_only_whole_files_and_the_next_build_completes(demo_source, reference_build, tmp_path):
    _, build_project = _demo_api()
    built_1core, targets = reference_build
    copy = _copy(demo_source, tmp_path / "killed")
    proc = subprocess.Popen([sys.executable, "-m", "wavetrail.cli", "build", str(copy), "--cores", "2",
                             *(["--", *targets] if targets else [])],
                            stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, start_new_session=True)
    ledger_dir = copy / "results/ledger"
    deadline = time.monotonic() + 240
    try:
        while time.monotonic() < deadline and proc.poll() is None:
            done = [p for p in ledger_dir.glob("*.json")] if ledger_dir.is_dir() else []
            if len(done) >= (2 if targets else 4):
                break
            time.sleep(0.05)
    finally:
        if proc.poll() is None:
            os.killpg(proc.pid, signal.SIGKILL)
        proc.wait(timeout=60)
    assert proc.returncode == -signal.SIGKILL, "the build finished before it could be killed"
    time.sleep(0.5)  # let killed children go
    reference = result_files(built_1core)
    partial = result_files(copy)
    assert 0 < len(partial) <= len(reference)
    # every file that exists is whole: byte-identical to the reference build
    assert [k for k in partial if partial[k] != reference.get(k)] == []
    records = ledger.read_records(copy)  # raises on a torn record
    assert 0 < len(records) < len(ledger.read_records(built_1core))  # killed part-way
    for rec in records:  # a record exists only for a job whose outputs are all whole
        for out in rec["outputs"]:
            assert out["sha256"] == hashlib.sha256(reference[out["path"]]).hexdigest(), out["path"]
    # Snakemake's own directory lock survives a SIGKILL, and so does our guard saying
    # "running"; the next build sees that no process holds the guard, lifts the stale
    # lock itself and completes where a clean build ends, with no manual unlocking
    from wavetrail.build import GUARD_FILE

    assert (copy / GUARD_FILE).read_text().startswith("running ")
    assert any((copy / ".snakemake" / "locks").iterdir())
    notes: list[str] = []
    build_project(copy, cores=2, extra=targets, progress=notes.append)
    assert any("removed the Snakemake lock left by a build that was killed" in n for n in notes), notes
    assert (copy / GUARD_FILE).read_text() == "done\n"
    final = result_files(copy)
    assert sorted(final) == sorted(reference)
    assert [k for k in final if final[k] != reference[k]] == []
    assert ledger.drift_table(copy).empty
