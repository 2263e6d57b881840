"""Packing and verifying reviewer archives on a hand-built project (no workflow run).

Tamper tests unpack a good archive, change one thing, pack it again by hand
with zipfile, and check that verify fails with a message naming the member.
"""

from __future__ import annotations

import json
import tarfile
import zipfile
from pathlib import Path

import bagit
import pytest

from test_archive_helpers import make_project
from wavetrail.archive import pack_project, verify_archive
from wavetrail.archive.compare import DIFFERENT, IDENTICAL, MISSING, WITHIN, compare_files
from wavetrail.archive.pack import replace_data_key
from wavetrail.errors import ArchiveError


@pytest.fixture(scope="module")
def project(tmp_path_factory):
    return make_project(tmp_path_factory.mktemp("arch") / "proj", n=200, email=False)


@pytest.fixture(scope="module")
def archives(project, tmp_path_factory):
    out = tmp_path_factory.mktemp("out")
    return {mode: pack_project(project, raw=mode, output=out / f"{mode}.zip")
            for mode in ("include", "exclude", "stand-in")}


def _members(archive: Path) -> dict[str, bytes]:
    with zipfile.ZipFile(archive) as zf:
        return {i.filename: zf.read(i) for i in zf.infolist()}


def _rezip(members: dict[str, bytes], path: Path) -> Path:
    with zipfile.ZipFile(path, "w", compression=zipfile.ZIP_DEFLATED) as zf:
        for name in sorted(members):
            zf.writestr(name, members[name])
    return path


# ----------------------------------------------------------------------------- packing


@pytest.mark.parametrize("mode", ["include", "exclude", "stand-in"])
def test_every_mode_verifies(archives, mode):
    report = verify_archive(archives[mode])
    assert report.ok, report.summary
    statuses = dict(zip(report.table["check"] + ":" + report.table["target"], report.table["status"]))
    assert statuses[f"bag:proj-{mode}"] == "ok"
    assert statuses["provenance:all outputs"] == "ok"
    names = set(_members(archives[mode]))
    raw = f"proj-{mode}/data/data/raw/panel.csv"
    assert (raw in names) == (mode == "include")
    # person-level scores go out only with the raw data
    assert (f"proj-{mode}/data/results/scores/scores.csv" in names) == (mode == "include")
    assert f"proj-{mode}/data/results/ledger/score_scales.json" in names
    # the stored panel is a row-level copy of the raw data: it goes where they go
    stored = "results/checks/panel.parquet"
    assert (f"proj-{mode}/data/{stored}" in names) == (mode == "include")
    manifest = json.loads(_members(archives[mode])[f"proj-{mode}/data/wavetrail-archive.json"])
    ledger_rows = report.table[(report.table["check"] == "ledger") & (report.table["target"] == stored)]
    if mode == "include":
        assert stored not in manifest["withheld"]
        assert ledger_rows.empty  # matched with the others: no row of its own
    else:
        assert manifest["withheld"][stored]["reason"].startswith("row-level copy of the raw data")
        assert ledger_rows["status"].tolist() == ["withheld"]
        readme = _members(archives[mode])[f"proj-{mode}/data/ARCHIVE-README.md"].decode()
        assert f"`{stored}`: row-level copy of the raw data" in readme
    # no disclosure finding names it (it holds no identifier column)
    assert all(f["file"] != stored for f in manifest["disclosure"]["findings"])


def test_bag_is_valid_to_bagit_and_carries_project_facts(archives, project, tmp_path):
    import git

    commit = git.Repo(project).head.commit.hexsha
    with zipfile.ZipFile(archives["include"]) as zf:
        zf.extractall(tmp_path)  # our own archive, written by the test: plain extraction is fine here
    bag = bagit.Bag(str(tmp_path / "proj-include"))
    bag.validate(fast=False)
    assert bag.info["Project-Commit"] == commit
    assert bag.info["Project-Title"] == "Invented test panel"
    assert bag.info["Wavetrail-Version"] == "0.1.0"
    assert bag.info["Bagging-Date"] == "2026-12-01"  # the commit date, not today
    assert bag.info["Bag-Software-Agent"] == "wavetrail 0.1.0"
    assert set(bag.payload_entries()) >= {"data/ro-crate-metadata.json", "data/config/config.yaml",
                                          "data/workflow/Snakefile", "data/environment/requirements.lock"}


def test_packing_is_byte_stable(project, archives, tmp_path):
    again = pack_project(project, raw="include", output=tmp_path / "again.zip")
    assert again.read_bytes() == archives["include"].read_bytes()
    tgz1 = pack_project(project, raw="exclude", output=tmp_path / "a.tar.gz")
    tgz2 = pack_project(project, raw="exclude", output=tmp_path / "b.tar.gz")
    assert tgz1.read_bytes() == tgz2.read_bytes()
    assert verify_archive(tgz1).ok
    with tarfile.open(tgz1) as tf:
        assert all(m.isreg() and m.mtime > 0 and m.mode == 0o644 for m in tf.getmembers())


def test_crate_describes_every_record(archives):
    members = _members(archives["include"])
    graph = json.loads(members["proj-include/data/ro-crate-metadata.json"])["@graph"]
    by_id = {e["@id"]: e for e in graph}
    root = by_id["./"]
    assert {"@id": "https://w3id.org/ro/wfrun/workflow/0.5"} in root["conformsTo"]
    assert by_id["ro-crate-metadata.json"]["conformsTo"] == {"@id": "https://w3id.org/ro/crate/1.1"}
    assert root["datePublished"] == "2026-12-01T09:00:00+00:00"
    assert root["mainEntity"] == {"@id": "workflow/Snakefile"}
    assert "ComputationalWorkflow" in by_id["workflow/Snakefile"]["@type"]
    actions = [e for e in graph if e["@type"] == "CreateAction"]
    steps = sorted(a["@id"] for a in actions)
    assert steps == ["#run/check_data", "#run/confirm_raw_hashes", "#run/describe--outcome=sd",
                     "#run/lock_environment", "#run/score_scales", "#run/workflow"]
    assert sorted(m["@id"] for m in root["mentions"]) == steps
    score = by_id["#run/score_scales"]
    assert score["startTime"] == "2026-12-01T10:00:00+00:00" and score["endTime"] == "2026-12-01T10:00:05+00:00"
    assert {"@id": "data/raw/panel.csv"} in score["object"]
    assert score["result"] == [{"@id": "results/scores/scores.csv"}]
    params = [by_id[o["@id"]] for o in score["object"] if by_id[o["@id"]]["@type"] == "PropertyValue"]
    assert {(p["name"], p["value"]) for p in params} == {("seed", 11), ("scales", '["sd"]')}
    tool = by_id[score["instrument"]["@id"]]
    assert tool["@type"] == "SoftwareApplication" and tool["softwareVersion"] == "0.1.0"
    needs = {by_id[r["@id"]]["name"] for r in tool["softwareRequirements"]}
    assert {"numpy", "pandas"} <= needs
    assert all("softwareVersion" in by_id[r["@id"]] for r in tool["softwareRequirements"])
    assert by_id["#run/workflow"]["instrument"] == {"@id": "workflow/Snakefile"}


def test_stand_in_is_labelled_everywhere(archives):
    members = _members(archives["stand-in"])
    top = "proj-stand-in"
    names = [n for n in members if n.startswith(f"{top}/data/data/raw/")]
    assert names == [f"{top}/data/data/raw/panel.STAND-IN.csv"]
    assert "Stand-in: data/raw/panel.STAND-IN.csv: SYNTHETIC STAND-IN DATA - NOT THE REAL DATA" in \
        members[f"{top}/bag-info.txt"].decode()
    assert "STAND-IN DATA - NOT THE REAL DATA" in members[f"{top}/data/ARCHIVE-README.md"].decode()
    graph = json.loads(members[f"{top}/data/ro-crate-metadata.json"])["@graph"]
    entity = next(e for e in graph if e["@id"] == "data/raw/panel.STAND-IN.csv")
    assert "NOT THE REAL DATA" in entity["description"] and entity["name"].startswith("STAND-IN")
    # the archive's registry and settings point at the stand-in, so a rebuild runs on it
    registry = members[f"{top}/data/data/SHA256SUMS"].decode()
    assert registry.endswith("  raw/panel.STAND-IN.csv\n") and len(registry.splitlines()) == 1
    assert "data: [data/raw/panel.STAND-IN.csv]" in members[f"{top}/data/config/config.yaml"].decode()
    manifest = json.loads(members[f"{top}/data/wavetrail-archive.json"])
    assert manifest["stand-in"]["path"] == "data/raw/panel.STAND-IN.csv"
    assert set(manifest["altered"]) == {"config/config.yaml", "data/SHA256SUMS"}
    import hashlib

    assert manifest["stand-in"]["sha256"] == hashlib.sha256(members[f"{top}/{'data/' + names[0][len(top) + 6:]}"]).hexdigest()


def test_refuses_dirty_tree_and_drifted_ledger(tmp_path):
    root = make_project(tmp_path / "proj", n=80, email=False)
    (root / "config/codebook.yaml").write_text((root / "config/codebook.yaml").read_text() + "# edit\n")
    with pytest.raises(ArchiveError, match=r"config/codebook.yaml: uncommitted change") as err:
        pack_project(root, raw="exclude")
    assert "--allow-dirty" in str(err.value)
    assert pack_project(root, raw="exclude", allow_dirty=True, output=tmp_path / "d.zip").is_file()
    report = verify_archive(tmp_path / "d.zip")
    assert any(report.table["check"] == "state")  # the reviewer sees it was packed dirty
    root2 = make_project(tmp_path / "proj2", n=80, email=False)
    fit = root2 / "results/growth/fit.csv"
    fit.write_text(fit.read_text().replace("linear", "lineal"))
    with pytest.raises(ArchiveError, match=r"results/growth/fit.csv: bytes differ from its ledger record"):
        pack_project(root2, raw="exclude")


def test_refuses_unknown_mode_and_unbuilt_project(tmp_path, project):
    from wavetrail.errors import UsageError

    with pytest.raises(UsageError):
        pack_project(project, raw="some")
    with pytest.raises(ArchiveError, match="must end in .zip or .tar.gz"):
        pack_project(project, raw="exclude", output=tmp_path / "x.rar")


# ----------------------------------------------------------------------------- tampering


def _tampered(archives, tmp_path, change) -> Path:
    members = _members(archives["include"])
    change(members)
    return _rezip(members, tmp_path / "tampered.zip")


TOP = "proj-include"


def _flip(data: bytes, at: int = 10) -> bytes:
    return data[:at] + bytes([data[at] ^ 0x01]) + data[at + 1:]


def test_flipped_byte_in_a_result_fails(archives, tmp_path):
    target = f"{TOP}/data/results/growth/fit.csv"
    report = verify_archive(_tampered(archives, tmp_path, lambda m: m.__setitem__(target, _flip(m[target]))))
    assert not report.ok
    assert "results/growth/fit.csv" in report.summary and "sha256 validation failed" in report.summary


def test_edited_manifest_fails(archives, tmp_path):
    name = f"{TOP}/manifest-sha256.txt"

    def edit(m):
        lines = m[name].decode().splitlines()
        digest, path = lines[0].split(" ", 1)
        lines[0] = "0" * 64 + " " + path
        m[name] = ("\n".join(lines) + "\n").encode()

    report = verify_archive(_tampered(archives, tmp_path, edit))
    assert not report.ok
    assert "manifest-sha256.txt" in report.summary


def test_removed_payload_file_fails(archives, tmp_path):
    target = f"{TOP}/data/results/checks/descriptives.csv"
    report = verify_archive(_tampered(archives, tmp_path, lambda m: m.pop(target)))
    assert not report.ok
    assert f"{TOP}/data/results/checks/descriptives.csv: listed in the manifest but missing" in report.summary


def test_added_unlisted_file_fails(archives, tmp_path):
    target = f"{TOP}/data/results/extra.csv"
    report = verify_archive(_tampered(archives, tmp_path, lambda m: m.__setitem__(target, b"a\n1\n")))
    assert not report.ok
    assert f"{target}: in the archive but listed in no manifest" in report.summary


def test_fetch_txt_is_rejected(archives, tmp_path):
    target = f"{TOP}/fetch.txt"
    report = verify_archive(_tampered(archives, tmp_path,
                                      lambda m: m.__setitem__(target, b"https://example.org/x 10 data/x\n")))
    assert not report.ok and "fetch.txt" in report.summary


def test_consistent_forgery_is_caught_by_the_ledger(archives, tmp_path):
    """Rewrite a result and every manifest so the bag is valid: the ledger hash still disagrees."""
    import hashlib

    target = "data/results/growth/fit.csv"

    def forge(m):
        m[f"{TOP}/{target}"] = m[f"{TOP}/{target}"].replace(b"linear", b"lineal")
        man = m[f"{TOP}/manifest-sha256.txt"].decode().splitlines()
        new = hashlib.sha256(m[f"{TOP}/{target}"]).hexdigest()
        man = [f"{new}  {target}" if line.endswith(" " + target) else line for line in man]
        m[f"{TOP}/manifest-sha256.txt"] = ("\n".join(man) + "\n").encode()
        tag = m[f"{TOP}/tagmanifest-sha256.txt"].decode().splitlines()
        mh = hashlib.sha256(m[f"{TOP}/manifest-sha256.txt"]).hexdigest()
        tag = [f"{mh}  manifest-sha256.txt" if line.endswith(" manifest-sha256.txt") else line for line in tag]
        m[f"{TOP}/tagmanifest-sha256.txt"] = ("\n".join(tag) + "\n").encode()

    report = verify_archive(_tampered(archives, tmp_path, forge))
    assert not report.ok
    bad = report.table[report.table["status"] == "fail"]
    assert list(bad["check"]) == ["ledger"] and list(bad["target"]) == ["results/growth/fit.csv"]


def test_rebuild_of_exclude_mode_is_refused_with_a_reason(archives, tmp_path):
    report = verify_archive(archives["exclude"], rebuild=True, json_path=tmp_path / "r.json")
    assert not report.ok
    assert "not possible: the archive holds no raw data" in report.summary
    assert "isolated environment" in report.summary
    saved = json.loads((tmp_path / "r.json").read_text())
    assert saved["ok"] is False and any(c["check"] == "rebuild" for c in saved["checks"])


def test_verify_of_a_missing_file_is_a_clean_error(tmp_path):
    with pytest.raises(ArchiveError, match="no archive at"):
        verify_archive(tmp_path / "nothing.zip")


# ----------------------------------------------------------------------------- pieces


def test_compare_files_verdicts(tmp_path):
    a, b = tmp_path / "a.csv", tmp_path / "b.csv"
    a.write_text("name,x,y\nu,1.0,2\nv,3.0,4\n")
    b.write_text("name,x,y\nu,1.0,2\nv,3.0,4\n")
    assert compare_files(a, b).status == IDENTICAL
    b.write_text("name,x,y\nu,1.0000000001,2\nv,3.0,4\n")
    verdict = compare_files(a, b, rtol=1e-6)
    assert verdict.status == WITHIN and verdict.max_rel_diff == pytest.approx(1e-10, rel=1e-3)
    b.write_text("name,x,y\nu,1.01,2\nv,3.0,4\n")
    verdict = compare_files(a, b, rtol=1e-6)
    assert verdict.status == DIFFERENT and "x: row 1 1 vs 1.01" in verdict.detail
    b.write_text("name,x,y\nu,1.0,2\nw,3.0,4\n")
    assert "name: row 2 'v' vs 'w'" in compare_files(a, b).detail
    assert compare_files(a, tmp_path / "none.csv").status == MISSING
    j1, j2 = tmp_path / "a.json", tmp_path / "b.json"
    j1.write_text(json.dumps({"k": [1.0, 2.0], "s": "x"}))
    j2.write_text(json.dumps({"k": [1.0, 2.0 + 1e-9], "s": "x"}))
    assert compare_files(j1, j2).status == WITHIN
    j2.write_text(json.dumps({"k": [1.0, 2.5], "s": "x"}))
    assert "/k/1: 2.0 vs 2.5" in compare_files(j1, j2).detail
    p1, p2 = tmp_path / "a.png", tmp_path / "b.png"
    p1.write_bytes(b"\x89PNG1")
    p2.write_bytes(b"\x89PNG2")
    assert compare_files(p1, p2).status == DIFFERENT


def test_replace_data_key_keeps_other_lines():
    text = "# top\ndata:\n  - data/raw/a.csv\n  - data/raw/b.csv\ncodebook: config/codebook.yaml\nseed: 1\n"
    out = replace_data_key(text, ["data/raw/a.STAND-IN.csv"], "note")
    assert out == "# top\n# note\ndata: [data/raw/a.STAND-IN.csv]\ncodebook: config/codebook.yaml\nseed: 1\n"
    inline = replace_data_key("data: [data/raw/a.csv]  # raw\nseed: 2\n", ["x.csv"], "n")
    assert inline == "# n\ndata: [x.csv]\nseed: 2\n"


# ----------------------------------------------------------------------------- command line


def test_cli_pack_and_verify(tmp_path, capsys):
    from wavetrail.cli import main

    root = make_project(tmp_path / "proj", n=80, email=False)
    out = tmp_path / "cli.tar.gz"
    assert main(["pack", str(root), "--raw", "stand-in", "-o", str(out)]) == 0
    assert f"archive written: {out}" in capsys.readouterr().out.replace("\n", "")
    assert main(["verify", str(out), "--json-to", str(tmp_path / "v.json")]) == 0
    printed = capsys.readouterr().out
    assert "VERIFIED" in printed and "NOT VERIFIED" not in printed
    assert json.loads((tmp_path / "v.json").read_text())["ok"] is True
    # a refusal is one clean message and exit code 1
    (root / "workflow/Snakefile").write_text("# changed\n")
    assert main(["pack", str(root), "-o", str(tmp_path / "x.zip")]) == 1
    assert "workflow/Snakefile: uncommitted change" in capsys.readouterr().err
    # a tampered archive: exit 1, the member named
    members = {}
    with tarfile.open(out) as tf:
        for m in tf.getmembers():
            members[m.name] = tf.extractfile(m).read()
    key = "proj-stand-in/data/results/growth/fit.csv"
    members[key] = _flip(members[key])
    bad = tmp_path / "bad.zip"
    _rezip(members, bad)
    assert main(["verify", str(bad)]) == 1
    assert "results/growth/fit.csv" in capsys.readouterr().out
    assert main(["pack", str(root), "--raw", "all"]) == 2


def test_public_surface():
    import wavetrail.archive as archive

    assert set(archive.__all__) == {"pack_project", "verify_archive", "VerifyReport", "REBUILD_WARNING",
                                    "safe_extract", "Limits", "synthesize", "check_outputs", "compare_files"}
    assert all(hasattr(archive, name) for name in archive.__all__)


# ----------------------------------------------------------------------------- the stored panel


def test_stored_panel_with_an_identifier_column_blocks_include(tmp_path):
    """A stored panel never holds an identifier column; one that does (written by hand) blocks
    --raw include, and stays out (hash only) in exclude mode, where nothing of it goes out."""
    import pandas as pd

    from wavetrail import ledger
    from wavetrail._io import sha256_file, write_json

    root = make_project(tmp_path / "proj", n=60, email=True)
    stored = root / "results/checks/panel.parquet"
    pd.DataFrame({"pid": [1, 2], "wave": [1, 1], "email": ["a@x.example", "b@x.example"]}).to_parquet(stored)
    rec_path = root / ledger.LEDGER_DIR / ledger.record_name("check_data", {})
    rec = json.loads(rec_path.read_text())
    rec["outputs"] = ledger.file_entries(root, ["results/checks/panel.parquet"])
    write_json(rec_path, rec)
    desc = root / ledger.LEDGER_DIR / ledger.record_name("describe", {"outcome": "sd"})
    rec = json.loads(desc.read_text())
    for e in rec["inputs"]:
        if e["path"] == "results/checks/panel.parquet":
            e["sha256"], e["size"] = sha256_file(stored), stored.stat().st_size
    write_json(desc, rec)
    with pytest.raises(ArchiveError) as err:
        pack_project(root, raw="include", output=tmp_path / "inc.zip")
    assert "stored panel column 'email' is an identifier" in str(err.value)
    out = pack_project(root, raw="exclude", output=tmp_path / "exc.zip")
    assert not any(n.endswith("panel.parquet") for n in _members(out))
    assert verify_archive(out).ok


def test_parquet_outputs_compare_by_content(tmp_path):
    import numpy as np
    import pandas as pd

    frame = pd.DataFrame({"pid": np.arange(50), "x": np.linspace(0, 1, 50), "c": pd.array(["a", "b"] * 25)})
    frame.to_parquet(tmp_path / "a.parquet", compression="zstd")
    frame.to_parquet(tmp_path / "b.parquet", compression="snappy")
    assert compare_files(tmp_path / "a.parquet", tmp_path / "b.parquet").status == WITHIN
    assert compare_files(tmp_path / "a.parquet", tmp_path / "a.parquet").status == IDENTICAL
    frame.loc[7, "x"] += 0.5
    frame.to_parquet(tmp_path / "c.parquet")
    far = compare_files(tmp_path / "a.parquet", tmp_path / "c.parquet")
    assert far.status == DIFFERENT and far.detail.startswith("x: row 8")
    frame.drop(columns=["c"]).to_parquet(tmp_path / "d.parquet")
    assert "columns differ" in compare_files(tmp_path / "a.parquet", tmp_path / "d.parquet").detail
