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
from wavetrail.archive.pack import MANIFEST
from wavetrail.archive.safe_extract import DEFAULT_LIMITS, Limits, safe_extract
from wavetrail.archive.schema import (ARCHIVE_SCHEMA, BAG_INFO_KEYS, LEDGER_SCHEMA, STAND_IN_LABEL, PathProblem,
                                      payload_file, schema_problems)

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
    if details.get("code"):
        lines.append(details["code"]["headline"])
    if details.get("rebuilt_on_stand_in"):
        lines.append("stand-in: the outputs were rebuilt on the STAND-IN rows and not compared with the "
                     "archived results (those come from the real data); the rebuild shows only that the "
                     "workflow runs end to end")
    if rebuild:
        lines.append("note: " + REBUILD_WARNING)
    report = VerifyReport(table=table, summary="\n".join(lines), ok=ok, details=details)
    if json_path is not None:
        write_json(json_path, report.to_dict())
    return report


def verify_archive(archive, rebuild: bool = False, json_path=None, rtol: float = 1e-6,
                   limits: Limits = DEFAULT_LIMITS, cores: int = 1, progress=None) -> VerifyReport:
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
    progress : callable, optional
        Called with a line of text before the rebuild starts (what code it
        would run: stock, or the files the authors added or changed).

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
        try:
            info = read_bag_info(bag)
        except ArchiveError as err:
            rows.add("bag", "bag-info.txt", FAIL, str(err))
            return _finish(rows, json_path, details, rebuild, archive)
        rows.add("archive", top, NOTE,
                 f"{manifest['title']} at commit {manifest['commit'][:10]}, raw data mode "
                 f"{manifest['mode']}, packed by wavetrail {manifest['wavetrail']}")
        _check_bag_info(info, manifest, rows)
        details["packed_by"] = manifest["wavetrail"]
        records = _guarded(rows, "ledger", lambda: _check_ledger(payload, manifest, rows), [])
        _guarded(rows, "crate", lambda: _check_crate(payload, records, rows), None)
        _guarded(rows, "environment", lambda: _check_environment(payload, records, rows, details), None)
        code = _guarded(rows, "code", lambda: _check_code(payload, manifest, rows, details), None)
        for f in manifest["disclosure"].get("findings", []):
            if f.get("severity") == "block":
                rows.add("disclosure", str(f.get("file") or ""), WARN,
                         "accepted by the authors: " + str(f.get("message", "")))
        if manifest["state"].get("allowed"):
            rows.add("state", top, WARN, "packed with --allow-dirty: "
                     + "; ".join(manifest["state"].get("problems", [])[:3]))
        if rebuild:
            if progress is not None and code is not None:
                progress(code.headline())
            _guarded(rows, "rebuild", lambda: _rebuild(payload, manifest, records, Path(tmp), rows, rtol, cores),
                     None)
            details["rebuilt_on_stand_in"] = any(r["status"] == "rebuilt on stand-in" for r in rows.rows)
    return _finish(rows, json_path, details, rebuild, archive)


def _read_manifest(payload: Path, rows: _Rows) -> dict | None:
    try:
        path = payload_file(payload, MANIFEST)
    except PathProblem as err:
        rows.add("archive", f"data/{MANIFEST}", FAIL, str(err))
        return None
    if path is None:
        rows.add("archive", f"data/{MANIFEST}", FAIL, "missing: not an archive written by `wavetrail pack`")
        return None
    try:
        manifest = json.loads(path.read_bytes().decode("utf-8"))
    except (json.JSONDecodeError, UnicodeDecodeError, RecursionError) as err:
        rows.add("archive", f"data/{MANIFEST}", FAIL, f"not readable JSON ({err})")
        return None
    if isinstance(manifest, dict) and "standin" in manifest and "stand-in" not in manifest:
        manifest["stand-in"] = manifest.pop("standin")  # the key's spelling in archives of 0.1.0
    problems = schema_problems(manifest, ARCHIVE_SCHEMA, f"data/{MANIFEST}")
    if problems:
        for text in problems[:20]:
            rows.add("archive", f"data/{MANIFEST}", FAIL, f"malformed archive description: {text}")
        return None
    for kind in ("registry", "withheld", "altered"):
        for rel in manifest[kind]:
            if _unsafe(rel, rows, "archive", f"data/{MANIFEST} ({kind})"):
                return None
    standin = manifest["stand-in"]
    if standin is not None:
        for rel in [standin["path"], *standin.get("replaces", [])]:
            if _unsafe(rel, rows, "archive", f"data/{MANIFEST} (stand-in)"):
                return None
    if (manifest["mode"] == "stand-in") != (standin is not None):
        rows.add("archive", f"data/{MANIFEST}", FAIL, f"mode {manifest['mode']!r} does not fit its stand-in entry")
        return None
    return manifest


def _unsafe(rel, rows: _Rows, check: str, where: str) -> bool:
    """Record a FAIL row when ``rel`` is not a safe path inside the archive."""
    from wavetrail.archive.schema import check_rel

    try:
        check_rel(rel)
    except PathProblem as err:
        rows.add(check, str(rel)[:200], FAIL, f"{where}: {err}")
        return True
    return False


def _check_bag_info(info: dict, manifest: dict, rows: _Rows) -> None:
    """bag-info.txt must say what the archive description says (commit, mode, version, title)."""
    bad = False
    for key, field_name in BAG_INFO_KEYS.items():
        if info.get(key) != str(manifest[field_name]):
            rows.add("bag", "bag-info.txt", FAIL, f"{key} {info.get(key)!r} differs from the archive "
                                                  f"description's {field_name} ({manifest[field_name]!r})")
            bad = True
    if info.get("External-Identifier") != f"git:{manifest['commit']}":
        rows.add("bag", "bag-info.txt", FAIL, f"External-Identifier {info.get('External-Identifier')!r} differs "
                                              f"from the archive's commit")
        bad = True
    if manifest["mode"] == "stand-in" and STAND_IN_LABEL not in info and "Stand-In-Data" not in info:
        # "Stand-In-Data" is the label's spelling in archives of 0.1.0
        rows.add("bag", "bag-info.txt", FAIL, f"stand-in archive without the {STAND_IN_LABEL} label")
        bad = True
    if not bad:
        rows.add("bag", "bag-info.txt", OK, "commit, raw data mode, version and title agree with the archive's "
                                            "own description")


def _guarded(rows: _Rows, check: str, run, default):
    """Run one check; anything unforeseen becomes a named finding instead of a traceback."""
    try:
        return run()
    except PathProblem as err:
        rows.add(check, "archive", FAIL, f"refused to read a path: {err}")
    except WavetrailError as err:
        rows.add(check, "archive", FAIL, str(err))
    except Exception as err:  # malformed content the schemas did not foresee: a finding, never a traceback
        rows.add(check, "archive", FAIL, f"the archive could not be checked here ({type(err).__name__}: "
                                         f"{str(err)[:200]}); treat it as not verified")
    return default


def _read_records(payload: Path, rows: _Rows) -> list[dict] | None:
    """The ledger records, each validated against the ledger schema and its paths confined."""
    folder = payload / "results" / "ledger"
    if not folder.is_dir() or folder.is_symlink():
        return []
    records = []
    ok = True
    for path in sorted(folder.iterdir()):
        rel = path.relative_to(payload).as_posix()
        if path.name.startswith(".") or path.suffix != ".json":
            continue
        try:
            f = payload_file(payload, rel)
            rec = json.loads(f.read_bytes().decode("utf-8")) if f is not None else None
        except PathProblem as err:
            rows.add("ledger", rel, FAIL, str(err))
            ok = False
            continue
        except (json.JSONDecodeError, UnicodeDecodeError, RecursionError) as err:
            rows.add("ledger", rel, FAIL, f"not a readable ledger record ({err})")
            ok = False
            continue
        problems = schema_problems(rec, LEDGER_SCHEMA, rel)
        if problems:
            for text in problems[:5]:
                rows.add("ledger", rel, FAIL, f"malformed ledger record: {text}")
            ok = False
            continue
        if any(_unsafe(e["path"], rows, "ledger", rel) for e in rec["inputs"] + rec["outputs"]):
            ok = False
            continue
        rec["_file"] = rel
        records.append(rec)
    return records if ok else None


def _hash_of(payload: Path, rel: str) -> str | None:
    """sha256 of a regular file inside the payload (``None`` when absent); never leaves the payload."""
    f = payload_file(payload, rel)
    return None if f is None else sha256_file(f)


def _registry(payload: Path) -> dict[str, str]:
    from wavetrail.registry import read_registry

    return read_registry(payload)


def _check_ledger(payload: Path, manifest: dict, rows: _Rows) -> list[dict]:
    """Ledger hashes against the payload, and provenance closure of every output."""
    records = _read_records(payload, rows)
    if records is None:
        return []
    if not records:
        rows.add("ledger", "results/ledger", FAIL, "no ledger records in the archive")
        return []
    withheld = manifest.get("withheld") or {}
    altered = manifest.get("altered") or {}
    real_registry = manifest.get("registry") or {}
    standin = manifest.get("stand-in")
    try:
        archive_registry = _registry(payload)
    except (WavetrailError, UnicodeDecodeError) as err:
        rows.add("registry", "data/SHA256SUMS", FAIL, str(err))
        archive_registry = {}
    # the registry of the archive: files present must match; stand-in must be the only entry
    if standin:
        if archive_registry.get(standin["path"]) != standin.get("sha256"):
            rows.add("registry", standin["path"], FAIL, "data/SHA256SUMS does not describe the stand-in file")
        elif _hash_of(payload, standin["path"]) != standin["sha256"]:
            rows.add("registry", standin["path"], FAIL, "stand-in file missing or not matching its hash")
        elif "STAND-IN" not in standin["path"]:
            rows.add("registry", standin["path"], FAIL, "stand-in file name lacks the STAND-IN label")
        else:
            rows.add("registry", standin["path"], OK, "STAND-IN data (not the real data); registered hash matches")
    else:
        for rel, digest in sorted(archive_registry.items()):
            actual = _hash_of(payload, rel)
            if actual is not None:
                status = OK if actual == digest else FAIL
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
            rel = e["path"]
            actual = _hash_of(payload, rel)
            if rel in withheld:
                if withheld[rel].get("sha256") == e["sha256"]:
                    n_withheld += 1
                    rows.add("ledger", rel, "withheld", withheld[rel].get("reason", "not in the archive"))
                else:
                    rows.add("ledger", rel, FAIL, f"withheld, but its kept hash differs from {rec['_file']}")
            elif actual is None:
                rows.add("ledger", rel, FAIL, f"recorded by {rec['_file']} but missing from the archive")
            else:
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
            actual = _hash_of(payload, rel)
            if actual is not None:
                if actual != e["sha256"]:
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

    try:
        path = payload_file(payload, CRATE)
        graph = json.loads(path.read_bytes().decode("utf-8"))["@graph"]
        if not isinstance(graph, list):
            raise TypeError("@graph is not a list")
    except (OSError, AttributeError, json.JSONDecodeError, UnicodeDecodeError, KeyError, TypeError) as err:
        rows.add("crate", CRATE, FAIL, f"missing or not an RO-Crate ({err})")
        return
    actions = {e.get("@id") for e in graph if isinstance(e, dict) and e.get("@type") == "CreateAction"}
    expected = {f"#run/{Path(r['_file']).stem}" for r in records}
    missing = sorted(expected - actions)
    if missing:
        rows.add("crate", CRATE, FAIL, f"{len(missing)} ledger record(s) without a CreateAction, e.g. {missing[0]}")
    else:
        rows.add("crate", CRATE, OK, f"{len(expected)} jobs described as CreateActions")


def _check_code(payload: Path, manifest: dict, rows: _Rows, details: dict):
    """Rows for every workflow file a rebuild would run that wavetrail did not ship."""
    from wavetrail import __version__
    from wavetrail.archive.code import compare_workflow

    report = compare_workflow(payload)
    against = f"wavetrail {__version__}"
    if manifest["wavetrail"] != __version__:
        rows.add("code", "workflow", NOTE, f"packed by wavetrail {manifest['wavetrail']}; compared with the stock "
                                           f"files of {against} installed here, which may differ")
    for c in report.changes:
        rows.add("code", c.path, NOTE if c.change == "removed" else WARN, f"{c.change}: {c.summary}")
    for rel in report.outside:
        rows.add("code", rel, WARN, "code outside workflow/ (a workflow file could include or run it)")
    if report.stock:
        rows.add("code", "workflow", OK, f"stock: the {report.stock_files} workflow files equal those {against} "
                                         "ships")
    details["code"] = {"stock": report.stock, "headline": report.headline(),
                       "changes": [c.__dict__ for c in report.changes], "outside": report.outside}
    return report


def _check_environment(payload: Path, records: list[dict], rows: _Rows, details: dict) -> None:
    from wavetrail.environment import LOCK_PATH, compare_with_installed

    lock = payload_file(payload, LOCK_PATH)
    if lock is None:
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
            # The workflow ran to the end, so every declared output exists; a file the real data
            # gave and the stand-in rows did not is one drawn only when the data show something
            # (e.g. the expected-trajectory figure when the forest splits).
            if new.is_file():
                rows.add("rebuild", rel, "rebuilt on stand-in", "numbers come from synthetic rows and are not compared")
            else:
                rows.add("rebuild", rel, NOTE, "not written on the stand-in rows: this output depends on what the "
                                              "data show (a figure drawn only when there is something to draw); "
                                              "the workflow itself ran to the end")
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
