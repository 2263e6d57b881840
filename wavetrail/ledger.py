"""The ledger: one JSON record per workflow job, and what can be read from the records.

A record (schema ``wavetrail-ledger/1``, see DEVELOPERS.md) says which step
ran with which wildcards, params and seed, the sha256 and size of every input
and output, when, under which Python, platform and package versions, in which
environment (``lock_sha256``: the sha256 of the lock text of the running
environment, equal to the hash of ``environment/requirements.lock`` when the
lock is current), at which git commit (and whether the tree was dirty), with
which wavetrail version. Records live in ``results/ledger/<step>[--k=v...].json``
and are written atomically, one file per job, so parallel jobs never share a
file and a killed job leaves no partial record.
"""

from __future__ import annotations

import json
import platform
import re
from datetime import datetime, timezone
from pathlib import Path, PurePosixPath
from typing import Any, Iterable

import pandas as pd

from wavetrail import __version__
from wavetrail._io import sha256_file, write_json
from wavetrail.errors import WavetrailError

SCHEMA = "wavetrail-ledger/1"
LEDGER_DIR = "results/ledger"

#: distributions whose versions each record names (others are in the lock, via lock_sha256)
PACKAGES = (
    "wavetrail", "numpy", "scipy", "pandas", "snakemake", "matplotlib", "pyyaml", "jsonschema",
    "papermill", "nbconvert", "nbformat", "ipykernel", "bagit", "rocrate", "pyreadstat", "pyarrow",
    "gitpython", "cookiecutter",
)

RECORD_KEYS = ("schema", "step", "wildcards", "inputs", "outputs", "params", "seed", "started",
               "finished", "python", "platform", "packages", "lock_sha256", "git", "wavetrail", "sources")
#: keys every record must have (``sources`` came later: older records lack it)
REQUIRED_KEYS = tuple(k for k in RECORD_KEYS if k != "sources")

_SAFE = re.compile(r"[^A-Za-z0-9._=+-]+")


# -- writing ------------------------------------------------------------------------------

def record_name(step: str, wildcards: dict[str, Any] | None = None) -> str:
    """File name of a job's record: ``<step>[--k=v...].json`` with wildcards sorted by key."""
    parts = [step] + [f"{k}={wildcards[k]}" for k in sorted(wildcards or {})]
    return _SAFE.sub("_", "--".join(parts)) + ".json"


def _flatten(value) -> list[str]:
    if value is None:
        return []
    if isinstance(value, dict):
        return [p for v in value.values() for p in _flatten(v)]
    if isinstance(value, (list, tuple)):
        return [p for v in value for p in _flatten(v)]
    return [str(value)]


def _posix_rel(project: Path, p: str) -> str:
    path = Path(p)
    if path.is_absolute():
        try:
            path = path.resolve().relative_to(project.resolve())
        except ValueError:
            return path.as_posix()
    return PurePosixPath(path.as_posix()).as_posix()


def file_entries(project: str | Path, paths: Iterable[str]) -> list[dict[str, Any]]:
    """``[{"path", "sha256", "size"}]`` for ``paths`` (sorted, unique; folders expanded to their files)."""
    project = Path(project)
    seen: dict[str, dict[str, Any]] = {}
    for p in paths:
        rel = _posix_rel(project, p)
        full = project / rel
        files = sorted(q for q in full.rglob("*") if q.is_file()) if full.is_dir() else [full]
        for f in files:
            frel = _posix_rel(project, str(f)) if full.is_dir() else rel
            if frel in seen:
                continue
            if f.is_file():
                seen[frel] = {"path": frel, "sha256": sha256_file(f), "size": f.stat().st_size}
            else:
                seen[frel] = {"path": frel, "sha256": None, "size": None}
    return [seen[k] for k in sorted(seen)]


def _jsonable(value):
    """Params as plain JSON values (Snakemake hands over Namedlists, paths, numpy scalars)."""
    if value is None or isinstance(value, (bool, int, float, str)):
        return value
    if isinstance(value, Path):
        return value.as_posix()
    if isinstance(value, dict):
        return {str(k): _jsonable(v) for k, v in value.items()}
    if isinstance(value, (list, tuple, set, frozenset)):
        items = [_jsonable(v) for v in value]
        return sorted(items, key=repr) if isinstance(value, (set, frozenset)) else items
    if hasattr(value, "item") and callable(value.item):  # numpy scalar
        try:
            return _jsonable(value.item())
        except (TypeError, ValueError):
            pass
    if hasattr(value, "tolist"):
        return _jsonable(value.tolist())
    return str(value)


#: build products, left out of the dirty flag (a build changes them by design)
BUILD_PRODUCTS = ("results", "environment/requirements.lock")


def git_state(project: str | Path) -> dict[str, Any]:
    """``{"commit": hex or None, "dirty": bool or None}``; both ``None`` outside a git repository.

    ``dirty`` is true when a tracked file differs from the commit or an
    untracked, non-ignored file exists — outside the build products
    (``results/``, ``environment/requirements.lock``), which every build
    rewrites. A repository without commits has commit ``None`` and dirty ``True``.
    """
    from wavetrail.registry import open_repo

    repo = open_repo(project)
    if repo is None:
        return {"commit": None, "dirty": None}
    try:
        commit = repo.head.commit.hexsha if repo.head.is_valid() else None
        if commit is None:
            return {"commit": None, "dirty": True}
        root = Path(repo.working_tree_dir).resolve()
        prefix = Path(project).resolve().relative_to(root).as_posix()
        prefix = "" if prefix == "." else prefix + "/"
        specs = [f":(top){prefix}"] + [f":(top,exclude){prefix}{p}" for p in BUILD_PRODUCTS]
        status = repo.git.status("--porcelain", "--untracked-files=all", "--", *specs)
    except Exception:  # a broken repository must not fail a finished job
        return {"commit": None, "dirty": None}
    return {"commit": commit, "dirty": bool(status.strip())}


def environment_facts() -> dict[str, Any]:
    """The parts of a record that describe the running environment."""
    from wavetrail import environment

    return {
        "python": environment.interpreter(),
        "platform": platform.platform(),
        "packages": environment.package_versions(PACKAGES),
        "lock_sha256": environment.fingerprint(),
    }


def build_record(job, finished: str | None = None, facts: dict[str, Any] | None = None) -> dict[str, Any]:
    """The ledger record of a finished job (a :class:`wavetrail.stages.runner.Job`)."""
    project = Path(job.project)
    facts = environment_facts() if facts is None else facts
    return {
        "schema": SCHEMA,
        "step": job.step,
        "wildcards": {str(k): str(v) for k, v in sorted((job.wildcards or {}).items())},
        "inputs": file_entries(project, _flatten(job.input)),
        "outputs": file_entries(project, _flatten(job.output)),
        "params": _jsonable(dict(job.params or {})),
        "seed": int(job.seed),
        "started": job.started or None,
        "finished": finished or datetime.now(timezone.utc).isoformat(timespec="seconds"),
        "python": facts["python"],
        "platform": facts["platform"],
        "packages": facts["packages"],
        "lock_sha256": facts["lock_sha256"],
        "git": git_state(project),
        "wavetrail": __version__,
        "sources": source_files(project),
    }


def record_job(job) -> Path:
    """Write the ledger record of a finished job; returns its path.

    Called by :func:`wavetrail.stages.runner.run_job` after every successful step.
    """
    record = build_record(job)
    path = Path(job.project) / LEDGER_DIR / record_name(job.step, job.wildcards)
    return write_json(path, record)


# -- sources: the hand-written files a job's result may depend on ---------------------------

#: folders of hand-written files (settings, codebook, plan, workflow code)
SOURCE_FOLDERS = ("config", "workflow")
#: sources that change how jobs are run, never what they compute
NOT_RESULT_SOURCES = ("workflow/profiles/",)
#: the analysis plan, and the steps that read it (the report shows deviations from the plan)
PLAN_SOURCE = "config/plan.lock.json"
PLAN_READERS = ("render_report",)


def source_files(project: str | Path) -> dict[str, str]:
    """``{path: sha256}`` of every file under ``config/`` and ``workflow/`` (no caches, temporaries)."""
    project = Path(project)
    out: dict[str, str] = {}
    for folder in SOURCE_FOLDERS:
        base = project / folder
        for f in sorted(base.rglob("*")) if base.is_dir() else []:
            rel = f.relative_to(project).as_posix()
            parts = f.relative_to(project).parts
            if ("__pycache__" in parts or any(x.startswith(".") for x in parts) or rel.endswith((".tmp", ".pyc"))
                    or not f.is_file() or f.is_symlink()):
                continue
            out[rel] = sha256_file(f)
    return out


def _matters(rel: str, rec: dict[str, Any], inputs_anywhere: set[str]) -> bool:
    """Whether a change of the source ``rel`` can change what the job of ``rec`` computed."""
    if rel.startswith(NOT_RESULT_SOURCES):
        return False
    if rel == PLAN_SOURCE:
        return rec.get("step") in PLAN_READERS
    if rel in inputs_anywhere:
        # a declared input (codebook, notebook): its hash is checked for the jobs that read it
        return False
    return True


def source_changes(project: str | Path, records: list[dict[str, Any]], repo=None) -> dict[str, list[str]]:
    """``{record file: [changed sources]}`` for jobs whose hand-written sources changed since they ran.

    A record written by this version lists the sha256 of every file under
    ``config/`` and ``workflow/`` at run time (``sources``); those are compared
    with the files now. For older records without that list, the git commit
    the job ran at is compared with ``HEAD`` (needs ``repo``). Either way only
    changes that can change the job's result count: profiles never do; the
    analysis plan only for the report; a file that is a declared input of a
    job only through that job's input hashes; everything else under
    ``config/`` (the settings) and ``workflow/`` (the code) always.
    """
    project = Path(project)
    current = source_files(project)
    inputs_anywhere = {e["path"] for r in records for e in r.get("inputs", [])}
    head = None
    if repo is not None:
        try:
            head = repo.head.commit if repo.head.is_valid() else None
        except Exception:
            head = None
    diffs: dict[str, list[str]] = {}
    out: dict[str, list[str]] = {}
    for rec in records:
        name = rec.get("_file", rec.get("step", "?"))
        recorded = rec.get("sources")
        if isinstance(recorded, dict):
            changed = sorted(p for p in set(recorded) | set(current)
                             if recorded.get(p) != current.get(p) and _matters(p, rec, inputs_anywhere))
        else:
            commit = (rec.get("git") or {}).get("commit")
            if head is None or not commit or commit == head.hexsha:
                continue
            if commit not in diffs:
                try:
                    diff = repo.commit(commit).diff(head, paths=list(SOURCE_FOLDERS))
                    diffs[commit] = sorted({d.b_path or d.a_path for d in diff})
                except Exception:
                    diffs[commit] = ["(commit not in this repository)"]
            changed = [p for p in diffs[commit] if p.startswith("(") or _matters(p, rec, inputs_anywhere)]
        if changed:
            out[name] = changed
    return out


def rerun_targets(project: str | Path, repo=None) -> list[tuple[str, str]]:
    """Steps ``wavetrail build`` must rerun although Snakemake sees their outputs as up to date.

    ``[(step, why)]``, one entry per step (a rule name): steps with an output
    whose bytes differ from its ledger record (edited by hand), and steps
    whose settings, plan or workflow code changed since they ran
    (:func:`source_changes`).
    """
    project = Path(project)
    try:
        records = read_records(project)
    except WavetrailError:
        return []
    out: dict[str, str] = {}
    for rec in records:
        for e in rec["outputs"]:
            f = project / e["path"]
            if f.is_file() and sha256_file(f) != e["sha256"] and rec["step"] not in out:
                out[rec["step"]] = f"{e['path']}: bytes differ from its ledger record"
    changes = source_changes(project, records, repo)
    for rec in records:
        changed = changes.get(rec["_file"])
        if changed and rec["step"] not in out:
            out[rec["step"]] = f"{', '.join(changed[:2])} changed since it ran"
    return sorted(out.items())


# -- reading ------------------------------------------------------------------------------

def read_records(project: str | Path) -> list[dict[str, Any]]:
    """Every ledger record of a project, sorted by record file name.

    Each record gains ``"_file"`` (its project-relative path). Unfinished
    temporary files of a killed job are ignored.

    Raises
    ------
    WavetrailError
        When a record is not valid JSON or not a ``wavetrail-ledger/1`` record
        (names the file).
    """
    project = Path(project)
    folder = project / LEDGER_DIR
    if not folder.is_dir():
        return []
    records = []
    for path in sorted(folder.glob("*.json")):
        if path.name.startswith("."):
            continue
        rel = path.relative_to(project).as_posix()
        try:
            rec = json.loads(path.read_text(encoding="utf-8"))
        except (OSError, UnicodeDecodeError, json.JSONDecodeError) as err:
            raise WavetrailError(f"{rel}: not a readable ledger record ({err})",
                                 hint="delete it and run `wavetrail build` to rerun that job") from None
        if not isinstance(rec, dict) or rec.get("schema") != SCHEMA:
            raise WavetrailError(f"{rel}: not a {SCHEMA} record",
                                 hint="delete it and run `wavetrail build` to rerun that job")
        missing = [k for k in REQUIRED_KEYS if k not in rec]
        if missing:
            raise WavetrailError(f"{rel}: ledger record lacks {', '.join(missing)}",
                                 hint="delete it and run `wavetrail build` to rerun that job")
        rec["_file"] = rel
        records.append(rec)
    return records


def producers(records: list[dict[str, Any]]) -> dict[str, dict[str, Any]]:
    """``{output path: record that wrote it}``."""
    return {out["path"]: rec for rec in records for out in rec["outputs"]}


def _revision(git: dict[str, Any]) -> str:
    commit = (git or {}).get("commit")
    if commit is None:
        return "no git" if (git or {}).get("dirty") is None else "no commit"
    return commit[:10] + ("+dirty" if git.get("dirty") else "")


def _current_lock_hash(project: Path) -> str | None:
    from wavetrail.environment import LOCK_PATH

    lock = project / LOCK_PATH
    return sha256_file(lock) if lock.is_file() else None


LEDGER_COLUMNS = ["output", "step", "wildcards", "inputs", "seed", "revision", "finished", "environment"]


def ledger_table(project: str | Path) -> pd.DataFrame:
    """One row per recorded output.

    Columns ``output, step, wildcards, inputs, seed, revision, finished, environment``:
    ``inputs`` joins the job's input paths with ``"; "``; ``revision`` is the
    short commit (``+dirty`` when the tree had changes); ``environment`` is
    ``locked`` when the job ran in the environment of the current
    ``environment/requirements.lock``, ``other <hash>`` when it ran elsewhere
    and ``unlocked`` when the project has no lock. Sorted by output.
    """
    project = Path(project)
    records = read_records(project)
    lock_hash = _current_lock_hash(project)
    rows = []
    for rec in records:
        if lock_hash is None:
            env = "unlocked"
        elif rec.get("lock_sha256") == lock_hash:
            env = "locked"
        else:
            env = f"other {str(rec.get('lock_sha256'))[:12]}"
        wild = ",".join(f"{k}={v}" for k, v in sorted(rec["wildcards"].items()))
        for out in rec["outputs"]:
            rows.append({
                "output": out["path"], "step": rec["step"], "wildcards": wild,
                "inputs": "; ".join(i["path"] for i in rec["inputs"]),
                "seed": rec["seed"], "revision": _revision(rec["git"]),
                "finished": rec["finished"], "environment": env,
            })
    df = pd.DataFrame(rows, columns=LEDGER_COLUMNS)
    return df.sort_values("output", ignore_index=True)


DRIFT_COLUMNS = ["file", "step", "problem", "recorded_sha256", "current_sha256", "detail"]


def drift_table(project: str | Path) -> pd.DataFrame:
    """Files that no longer match the ledger.

    Two kinds of row: ``changed`` / ``missing`` — an output whose bytes differ
    from its record (or which is gone); ``stale`` — an output whose job read an
    input that has changed (or gone) since, named in ``detail``. Columns
    ``file, step, problem, recorded_sha256, current_sha256, detail``, sorted by
    file and problem; empty when everything matches.
    """
    project = Path(project)
    records = read_records(project)
    cache: dict[str, str | None] = {}

    def current(rel: str) -> str | None:
        if rel not in cache:
            path = project / rel
            cache[rel] = sha256_file(path) if path.is_file() else None
        return cache[rel]

    rows = []
    for rec in records:
        for out in rec["outputs"]:
            now = current(out["path"])
            if now != out["sha256"]:
                rows.append({"file": out["path"], "step": rec["step"],
                             "problem": "missing" if now is None else "changed",
                             "recorded_sha256": out["sha256"], "current_sha256": now,
                             "detail": "file is gone" if now is None else "bytes differ from the ledger record"})
        changed_inputs = [i for i in rec["inputs"] if current(i["path"]) != i["sha256"]]
        if changed_inputs:
            detail = "input changed since: " + "; ".join(
                i["path"] + (" (gone)" if current(i["path"]) is None else "") for i in changed_inputs)
            for out in rec["outputs"]:
                rows.append({"file": out["path"], "step": rec["step"], "problem": "stale",
                             "recorded_sha256": out["sha256"], "current_sha256": current(out["path"]),
                             "detail": detail})
    df = pd.DataFrame(rows, columns=DRIFT_COLUMNS, dtype=object)
    return df.sort_values(["file", "problem"], ignore_index=True)


# -- lineage ------------------------------------------------------------------------------

#: inputs that are neither job outputs nor raw data but are legitimately hand-written sources
SOURCE_PREFIXES = ("config/", "data/SHA256SUMS", "workflow/")


def lineage(project: str | Path, path: str, records: list[dict[str, Any]] | None = None) -> pd.DataFrame:
    """Walk from ``path`` back through the records to files no job wrote.

    Returns
    -------
    DataFrame
        Columns ``file, step, depth, sha256, origin``: the file itself (depth 0),
        every file upstream of it once, the step that wrote it (empty for a source
        file) and ``origin`` — ``output`` (written by a recorded job),
        ``registered`` (raw data in data/SHA256SUMS with the same hash),
        ``source`` (a project source file under :data:`SOURCE_PREFIXES`: config,
        registry, workflow code) or ``untraced`` (none of these: a break in the
        provenance chain).
    """
    from wavetrail.registry import read_registry

    project = Path(project)
    records = read_records(project) if records is None else records
    made_by = producers(records)
    registered = read_registry(project)
    rel = _posix_rel(project, path)
    rows, seen = [], set()
    frontier = [(rel, 0, None)]
    while frontier:
        file, depth, sha = frontier.pop(0)
        if file in seen:
            continue
        seen.add(file)
        rec = made_by.get(file)
        if rec is not None:
            out_sha = next(o["sha256"] for o in rec["outputs"] if o["path"] == file)
            rows.append({"file": file, "step": rec["step"], "depth": depth, "sha256": out_sha, "origin": "output"})
            frontier.extend((i["path"], depth + 1, i["sha256"]) for i in rec["inputs"])
        else:
            if file in registered:
                origin = "registered" if sha is None or registered[file] == sha else "untraced"
            elif file.startswith(SOURCE_PREFIXES):
                origin = "source"
            else:
                origin = "untraced"
            rows.append({"file": file, "step": "", "depth": depth, "sha256": sha, "origin": origin})
    return pd.DataFrame(rows, columns=["file", "step", "depth", "sha256", "origin"])


def untraced_inputs(project: str | Path, records: list[dict[str, Any]] | None = None,
                    sources: tuple[str, ...] = SOURCE_PREFIXES) -> pd.DataFrame:
    """Inputs of any record that are neither another record's output (with the same hash),
    registered raw data (with the same hash), nor a project source file (config, registry,
    workflow code). Columns ``step, input, sha256, reason``; empty when the chain is closed.
    """
    from wavetrail.registry import read_registry

    project = Path(project)
    records = read_records(project) if records is None else records
    made_by = producers(records)
    registered = read_registry(project)
    rows = []
    for rec in records:
        for inp in rec["inputs"]:
            p, sha = inp["path"], inp["sha256"]
            if p in made_by:
                out_sha = next(o["sha256"] for o in made_by[p]["outputs"] if o["path"] == p)
                if out_sha != sha:
                    rows.append({"step": rec["step"], "input": p, "sha256": sha,
                                 "reason": f"read a different version than {made_by[p]['step']} recorded"})
            elif p in registered:
                if registered[p] != sha:
                    rows.append({"step": rec["step"], "input": p, "sha256": sha,
                                 "reason": "raw data hash differs from data/SHA256SUMS"})
            elif not any(p == s or p.startswith(s) for s in sources):
                rows.append({"step": rec["step"], "input": p, "sha256": sha,
                             "reason": "no record wrote it and it is not registered"})
    return pd.DataFrame(rows, columns=["step", "input", "sha256", "reason"])
