"""``wavetrail verify``: the reviewer's side of an archive.

Without ``--rebuild`` nothing from the archive is run, imported or unpickled:
the archive is extracted safely (:mod:`wavetrail.archive.safe_extract`), the
bag is validated with every checksum recomputed, the ledger records (JSON)
are checked against the payload, every output's inputs are traced back to
registered raw data (or the labelled stand-in) and project files, and the
reviewer's environment is compared with the lock.

With ``--rebuild`` the workflow is rerun in a temporary copy (this runs the
authors' code) and every recorded output is compared with the archived one:
identical, within tolerance (numeric tables, JSON) or different. In
stand-in mode the rebuilt numbers come from synthetic rows and are not
compared; the rebuild must simply produce every output.

The report is a table (``check, target, status, detail``); ``ok`` holds only
when no row failed.
"""

from __future__ import annotations

import json
import shutil
import tempfile
from dataclasses import dataclass, field
from pathlib import Path

import pandas as pd

from wavetrail._io import sha256_file, write_json
from wavetrail.errors import ArchiveError, WavetrailError

from wavetrail.archive import compare as cmp
from wavetrail.archive.bag import find_bag, read_bag_info, validate_bag
from wavetrail.archive.pack import MANIFEST, SCHEMA
from wavetrail.archive.safe_extract import DEFAULT_LIMITS, Limits, safe_extract

OK, FAIL, WARN, NOTE = "ok", "fail", "warn", "note"
COLUMNS = ["check", "target", "status", "detail"]
REBUILD_WARNING = ("--rebuild runs the authors' workflow code on this machine; run it in an isolated "
                   "environment (a container or a throw-away virtual machine without your credentials).")
#: outputs that describe the machine rather than the data: differences are reported, not failed
ENVIRONMENT_OUTPUTS = ("environment/requirements.lock",)


@dataclass
class VerifyReport:
    """What ``wavetrail verify`` found.

    Attributes
    ----------
    table : DataFrame
        One row per check: ``check, target, status, detail``; ``status`` is
        ``ok``, ``fail``, ``warn`` or ``note``, and for rebuilt outputs
        ``identical``, ``within tolerance``, ``different``, ``missing``,
        ``rebuilt on stand-in`` or ``withheld``.
    summary : str
        A few lines for people.
    ok : bool
        True when nothing failed.
    details : dict
        Extra material for the JSON report (environment differences, ...).
    """

    table: pd.DataFrame
    summary: str
    ok: bool
    details: dict = field(default_factory=dict)

    def to_dict(self) -> dict:
        return {"ok": self.ok, "summary": self.summary,
                "checks": self.table.to_dict("records"), "details": self.details}


_FAILING = {FAIL, cmp.DIFFERENT, cmp.MISSING}


class _Rows:
    def __init__(self):
        self.rows: list[dict] = []

    def add(self, check: str, target: str, status: str, detail: str = "") -> None:
        self.rows.append({"check": check, "target": target, "status": status, "detail": detail})

    def failed(self) -> bool:
        return any(r["status"] in _FAILING for r in self.rows)


def _finish(rows: _Rows, json_path, details: dict, rebuild: bool, archive: Path) -> VerifyReport:
    table = pd.DataFrame(rows.rows, columns=COLUMNS)
    ok = not rows.failed()
    counts = table["status"].value_counts()
    parts = ", ".join(f"{counts[k]} {k}" for k in sorted(counts.index))
    lines = [f"{archive.name}: {'VERIFIED' if ok else 'NOT VERIFIED'} ({parts})"]
    bad = table[table["status"].isin(_FAILING)]
    for _, r in bad.head(10).iterrows():
        lines.append(f"  {r['status']}: {r['target']}: {r['detail']}")
    if len(bad) > 10:
        lines.append(f"  ... and {len(bad) - 10} more")
    if rebuild:
        lines.append("note: " + REBUILD_WARNING)
    report = VerifyReport(table=table, summary="\n".join(lines), ok=ok, details=details)
    if json_path is not None:
        write_json(json_path, report.to_dict())
    return report


def verify_archive(archive, rebuild: bool = False, json_path=None, rtol: float = 1e-6,
                   limits: Limits = DEFAULT_LIMITS, cores: int = 1) -> VerifyReport:
    """Verify a reviewer archive.

    Parameters
    ----------
    archive : path
        A ``.zip`` or ``.tar.gz`` written by ``wavetrail pack``.
    rebuild : bool
        Also rerun the workflow in a temporary copy and compare every output
        (runs the authors' code).
    json_path : path, optional
        Also write the full report as JSON there.
    rtol : float
        Relative tolerance for numbers in tables and JSON when rebuilding.
    limits : Limits
        Extraction limits (members, bytes, compression ratio).
    cores : int
        Cores for the rebuild.

    Returns
    -------
    VerifyReport

    Raises
    ------
    ArchiveError
        Only when ``archive`` is not a file; every finding about its content
        is a row of the report.
    """
    archive = Path(archive)
    if not archive.is_file():
        raise ArchiveError(f"no archive at {archive}", hint="give the .zip or .tar.gz written by `wavetrail pack`")
    rows = _Rows()
    details: dict = {}
    with tempfile.TemporaryDirectory(prefix="wavetrail-verify-") as tmp:
        dest = Path(tmp) / "extracted"
        try:
            names = safe_extract(archive, dest, limits)
            rows.add("extract", archive.name, OK, f"{len(names)} files extracted safely")
        except ArchiveError as err:
            rows.add("extract", archive.name, FAIL, str(err))
            return _finish(rows, json_path, details, rebuild, archive)
        try:
            bag = find_bag(dest)
        except ArchiveError as err:
            rows.add("bag", archive.name, FAIL, str(err))
            return _finish(rows, json_path, details, rebuild, archive)
        top = bag.name if bag != dest else "."
        problems = validate_bag(bag, top)
        if problems:
            for p in problems:
                rows.add("bag", p["target"], FAIL, p["detail"])
            return _finish(rows, json_path, details, rebuild, archive)
        rows.add("bag", top, OK, "valid BagIt bag: every sha256 recomputed and matched, nothing missing or added")
        payload = bag / "data"
        manifest = _read_manifest(payload, rows)
        if manifest is None:
            return _finish(rows, json_path, details, rebuild, archive)
        info = read_bag_info(bag)
        rows.add("archive", top, NOTE,
                 f"{manifest.get('title')} at commit {str(manifest.get('commit'))[:10]}, raw data mode "
                 f"{manifest.get('mode')}, packed by wavetrail {manifest.get('wavetrail')}")
        if manifest.get("mode") == "stand-in" and "Stand-In-Data" not in info:
            rows.add("archive", "bag-info.txt", FAIL, "stand-in archive without the Stand-In-Data label")
        if info.get("Raw-Data-Mode") != manifest.get("mode"):
            rows.add("archive", "bag-info.txt", FAIL, f"Raw-Data-Mode {info.get('Raw-Data-Mode')!r} differs from "
                                                      f"the archive description ({manifest.get('mode')!r})")
        records = _check_ledger(payload, manifest, rows)
        _check_crate(payload, records, rows)
        _check_environment(payload, records, rows, details)
        for f in (manifest.get("disclosure") or {}).get("findings", []):
            if f.get("severity") == "block":
                rows.add("disclosure", f.get("file") or "", WARN, "accepted by the authors: " + f.get("message", ""))
        if manifest.get("state", {}).get("allowed"):
            rows.add("state", top, WARN, "packed with --allow-dirty: " + "; ".join(manifest["state"]["problems"][:3]))
        if rebuild:
            _rebuild(payload, manifest, records, Path(tmp), rows, rtol, cores)
    return _finish(rows, json_path, details, rebuild, archive)


def _read_manifest(payload: Path, rows: _Rows) -> dict | None:
    path = payload / MANIFEST
    if not path.is_file():
        rows.add("archive", f"data/{MANIFEST}", FAIL, "missing: not an archive written by `wavetrail pack`")
        return None
    try:
        manifest = json.loads(path.read_text(encoding="utf-8"))
    except (json.JSONDecodeError, UnicodeDecodeError) as err:
        rows.add("archive", f"data/{MANIFEST}", FAIL, f"not readable JSON ({err})")
        return None
    if not isinstance(manifest, dict) or manifest.get("schema") != SCHEMA:
        rows.add("archive", f"data/{MANIFEST}", FAIL, f"not a {SCHEMA} description")
        return None
    return manifest


def _registry(payload: Path) -> dict[str, str]:
    from wavetrail.registry import read_registry

    return read_registry(payload)


def _check_ledger(payload: Path, manifest: dict, rows: _Rows) -> list[dict]:
    """Ledger hashes against the payload, and provenance closure of every output."""
    from wavetrail.ledger import read_records

    try:
        records = read_records(payload)
    except WavetrailError as err:
        rows.add("ledger", "results/ledger", FAIL, str(err))
        return []
    if not records:
        rows.add("ledger", "results/ledger", FAIL, "no ledger records in the archive")
        return []
    withheld = manifest.get("withheld") or {}
    altered = manifest.get("altered") or {}
    real_registry = manifest.get("registry") or {}
    standin = manifest.get("standin")
    try:
        archive_registry = _registry(payload)
    except WavetrailError as err:
        rows.add("registry", "data/SHA256SUMS", FAIL, str(err))
        archive_registry = {}
    # the registry of the archive: files present must match; stand-in must be the only entry
    if standin:
        if archive_registry.get(standin["path"]) != standin.get("sha256"):
            rows.add("registry", standin["path"], FAIL, "data/SHA256SUMS does not describe the stand-in file")
        elif not (payload / standin["path"]).is_file() or sha256_file(payload / standin["path"]) != standin["sha256"]:
            rows.add("registry", standin["path"], FAIL, "stand-in file missing or not matching its hash")
        elif "STAND-IN" not in standin["path"]:
            rows.add("registry", standin["path"], FAIL, "stand-in file name lacks the STAND-IN label")
        else:
            rows.add("registry", standin["path"], OK, "STAND-IN data (not the real data); registered hash matches")
    else:
        for rel, digest in sorted(archive_registry.items()):
            f = payload / rel
            if f.is_file():
                status = OK if sha256_file(f) == digest else FAIL
                rows.add("registry", rel, status, "registered hash matches" if status == OK
                         else "bytes differ from data/SHA256SUMS")
            elif rel in withheld:
                rows.add("registry", rel, NOTE, "raw data not in the archive; registered hash kept")
            else:
                rows.add("registry", rel, FAIL, "registered but neither in the archive nor listed as withheld")
    produced: dict[str, tuple[dict, dict]] = {}
    for rec in records:
        for e in rec["outputs"]:
            if e["path"] in produced:
                rows.add("ledger", e["path"], FAIL, f"written by two jobs ({produced[e['path']][0]['_file']}, "
                                                    f"{rec['_file']})")
            produced[e["path"]] = (rec, e)
    n_ok = n_withheld = 0
    for rec in records:
        for e in rec["outputs"]:
            rel, f = e["path"], payload / e["path"]
            if rel in withheld:
                if withheld[rel].get("sha256") == e["sha256"]:
                    n_withheld += 1
                    rows.add("ledger", rel, "withheld", withheld[rel].get("reason", "not in the archive"))
                else:
                    rows.add("ledger", rel, FAIL, f"withheld, but its kept hash differs from {rec['_file']}")
            elif not f.is_file():
                rows.add("ledger", rel, FAIL, f"recorded by {rec['_file']} but missing from the archive")
            else:
                actual = sha256_file(f)
                if actual != e["sha256"]:
                    rows.add("ledger", rel, FAIL, f"{rec['_file']} records sha256 {e['sha256'][:12]}..., "
                                                  f"the archive holds {actual[:12]}...")
                else:
                    n_ok += 1
    # inputs: every one must come from a recorded job, the registered raw data or a project file
    leaves: dict[str, str] = {}
    for rec in records:
        for e in rec["inputs"]:
            rel = e["path"]
            if rel in produced:
                if produced[rel][1]["sha256"] != e["sha256"]:
                    rows.add("provenance", rel, FAIL, f"{rec['_file']} used other bytes than "
                                                      f"{produced[rel][0]['_file']} recorded (stale job)")
                continue
            if rel in real_registry:
                if real_registry[rel] != e["sha256"]:
                    rows.add("provenance", rel, FAIL, f"{rec['_file']} read raw data that differ from the "
                                                      "registered hash")
                else:
                    leaves[rel] = "registered raw data"
                continue
            if rel in altered:
                if altered[rel]["sha256"] != e["sha256"]:
                    rows.add("provenance", rel, FAIL, f"original hash kept for {rel} differs from {rec['_file']}")
                else:
                    leaves[rel] = "project file (altered for the stand-in; original hash matches)"
                continue
            f = payload / rel
            if f.is_file():
                if sha256_file(f) != e["sha256"]:
                    rows.add("provenance", rel, FAIL, f"{rec['_file']} used other bytes than the archive holds")
                else:
                    leaves[rel] = "project file"
                continue
            if rel in withheld and withheld[rel].get("sha256") == e["sha256"]:
                leaves[rel] = "withheld file (hash matches)"
                continue
            rows.add("provenance", rel, FAIL, f"input of {rec['_file']} has no source: not produced by a "
                                              "recorded job, not registered raw data, not in the archive")
    rows.add("ledger", "results/ledger", OK if n_ok + n_withheld else FAIL,
             f"{len(records)} records; {n_ok} outputs match their recorded sha256, {n_withheld} withheld")
    raw_leaves = sorted(p for p, kind in leaves.items() if kind == "registered raw data")
    if not raw_leaves:
        rows.add("provenance", "data/SHA256SUMS", FAIL, "no output traces back to registered raw data")
    elif not any(r["check"] == "provenance" and r["status"] == FAIL for r in rows.rows):
        label = " (the archive carries a labelled STAND-IN in their place)" if standin else ""
        rows.add("provenance", "all outputs", OK,
                 f"every input traces back to recorded jobs, {len(raw_leaves)} registered raw file(s){label} "
                 f"and {sum(1 for k in leaves.values() if k != 'registered raw data')} project file(s)")
    recorded = set(produced) | {r["_file"] for r in records}
    extra = sorted(p.relative_to(payload).as_posix() for p in (payload / "results").rglob("*")
                   if p.is_file() and p.relative_to(payload).as_posix() not in recorded) \
        if (payload / "results").is_dir() else []
    for rel in extra[:20]:
        rows.add("ledger", rel, WARN, "in results/ but written by no recorded job")
    return records


def _check_crate(payload: Path, records: list[dict], rows: _Rows) -> None:
    """The RO-Crate parses and describes every ledger record as a CreateAction."""
    from wavetrail.archive.pack import CRATE

    path = payload / CRATE
    try:
        graph = json.loads(path.read_text(encoding="utf-8"))["@graph"]
    except (OSError, json.JSONDecodeError, UnicodeDecodeError, KeyError, TypeError) as err:
        rows.add("crate", CRATE, FAIL, f"missing or not an RO-Crate ({err})")
        return
    actions = {e.get("@id") for e in graph if isinstance(e, dict) and e.get("@type") == "CreateAction"}
    expected = {f"#run/{Path(r['_file']).stem}" for r in records}
    missing = sorted(expected - actions)
    if missing:
        rows.add("crate", CRATE, FAIL, f"{len(missing)} ledger record(s) without a CreateAction, e.g. {missing[0]}")
    else:
        rows.add("crate", CRATE, OK, f"{len(expected)} jobs described as CreateActions")


def _check_environment(payload: Path, records: list[dict], rows: _Rows, details: dict) -> None:
    from wavetrail.environment import LOCK_PATH, compare_with_installed

    lock = payload / LOCK_PATH
    if not lock.is_file():
        rows.add("environment", LOCK_PATH, WARN, "the archive holds no environment lock")
        return
    digest = sha256_file(lock)
    others = sorted({r["_file"] for r in records if r.get("lock_sha256") and r["lock_sha256"] != digest})
    if others:
        rows.add("environment", LOCK_PATH, WARN, f"{len(others)} job(s) ran in an environment other than the "
                                                 f"lock describes (e.g. {others[0]})")
    try:
        diff = compare_with_installed(lock)
    except WavetrailError as err:
        rows.add("environment", LOCK_PATH, WARN, str(err))
        return
    details["environment_differences"] = diff.to_dict("records")
    if diff.empty:
        rows.add("environment", LOCK_PATH, OK, "this machine has exactly the locked packages")
    else:
        shown = "; ".join(f"{r.item}: {r.old} -> {r.new}" for r in diff.head(5).itertuples())
        rows.add("environment", LOCK_PATH, WARN, f"{len(diff)} difference(s) from the lock (locked -> here): "
                                                 f"{shown}{' ...' if len(diff) > 5 else ''}")


def _rebuild(payload: Path, manifest: dict, records: list[dict], tmp: Path, rows: _Rows,
             rtol: float, cores: int) -> None:
    from wavetrail.build import build_project

    mode = manifest.get("mode")
    if mode == "exclude":
        rows.add("rebuild", "workflow", FAIL, "not possible: the archive holds no raw data (mode exclude); "
                                              "ask the authors for a stand-in archive")
        return
    if any(r["status"] == FAIL for r in rows.rows):
        rows.add("rebuild", "workflow", FAIL, "skipped: the archive did not pass the checks above")
        return
    work = tmp / "rebuild" / "project"
    shutil.copytree(payload, work)
    shutil.rmtree(work / "results", ignore_errors=True)
    _git_snapshot(work)
    try:
        build_project(work, cores=cores)
    except WavetrailError as err:
        rows.add("rebuild", "workflow", FAIL, f"the rebuild failed: {err}")
        return
    rows.add("rebuild", "workflow", OK, "the workflow ran to the end in a temporary copy"
             + (" on the STAND-IN rows" if mode == "stand-in" else ""))
    withheld = manifest.get("withheld") or {}
    outputs = sorted({e["path"] for r in records for e in r["outputs"]})
    for rel in outputs:
        new = work / rel
        if rel in withheld and mode != "stand-in":
            rows.add("rebuild", rel, "withheld", "not in the archive, nothing to compare")
            continue
        if mode == "stand-in":
            rows.add("rebuild", rel, "rebuilt on stand-in" if new.is_file() else cmp.MISSING,
                     "numbers come from synthetic rows and are not compared" if new.is_file()
                     else "the rebuild did not write this output")
            continue
        verdict = cmp.compare_files(payload / rel, new, rtol=rtol)
        status = verdict.status
        detail = verdict.detail
        if rel in ENVIRONMENT_OUTPUTS and status == cmp.DIFFERENT:
            status = WARN
        rows.add("rebuild", rel, status, detail)


def _git_snapshot(work: Path) -> None:
    """Make the rebuild copy a git repository with one commit, so jobs record a revision."""
    try:
        import git
    except Exception:
        return
    repo = git.Repo.init(work)
    if not (work / ".gitignore").exists():
        (work / ".gitignore").write_text(".snakemake/\nlogs/\n", encoding="utf-8")
    repo.git.add("-A")
    env = {"GIT_AUTHOR_NAME": "wavetrail verify", "GIT_AUTHOR_EMAIL": "verify@localhost",
           "GIT_COMMITTER_NAME": "wavetrail verify", "GIT_COMMITTER_EMAIL": "verify@localhost"}
    with repo.git.custom_environment(**env):
        repo.git.commit("-q", "-m", "archive content for a rebuild", "--no-gpg-sign")
